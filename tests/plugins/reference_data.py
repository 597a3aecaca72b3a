"""Read the reference files of tests/reference/ (format described in each file's header).

Lines starting with '#' are comments; '[section]' starts a section; [meta] and
[dataset] hold 'key = value' lines, the other sections are CSV tables with a header row.
Helpers: ``load(name)`` and ``nist_set(name)`` (a NIST StRD linear set as arrays); fixture:
``reference_data`` (the same reader as ``load``).
"""

from __future__ import annotations

import csv
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

REFERENCE_DIR = Path(__file__).resolve().parent.parent / "reference"


def load(name: str) -> dict[str, object]:
    """Sections of a reference file: dicts for key/value sections, lists of row dicts for tables."""
    sections: dict[str, list[str]] = {}
    current = None
    for raw in (REFERENCE_DIR / name).read_text().splitlines():
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        if line.startswith("[") and line.endswith("]"):
            current = line[1:-1]
            sections[current] = []
        elif current is not None:
            sections[current].append(line)
    out: dict[str, object] = {}
    for section, lines in sections.items():
        if section in ("meta", "dataset"):
            out[section] = {
                k.strip(): v.split("#")[0].strip()
                for k, v in (line.split("=", 1) for line in lines)
            }
        else:
            out[section] = list(csv.DictReader(lines))
    return out


@pytest.fixture(scope="session")
def reference_data() -> Callable[[str], dict[str, object]]:
    """``load``: the sections of a reference file in tests/reference/, by file name."""
    return load


NIST_LINEAR_SETS = (
    "Norris",
    "Pontius",
    "NoInt1",
    "NoInt2",
    "Filip",
    "Longley",
    "Wampler1",
    "Wampler2",
    "Wampler3",
    "Wampler4",
    "Wampler5",
)
"""All eleven NIST StRD linear least squares sets, in NIST's order."""


@dataclass(frozen=True)
class NistSet:
    """One NIST StRD linear set from tests/reference/nist-<name>.txt.

    ``design`` holds the model's columns as NIST defines them (the intercept first when the
    model has one; for polynomial sets x, x**2, ..., x**degree), ``certified`` the
    certified coefficients and ``certified_sd`` their standard deviations, ``statistics``
    the certified residual SD, R-squared and the ANOVA entries given.
    """

    name: str
    design: np.ndarray
    y: np.ndarray
    params: tuple[str, ...]
    certified: np.ndarray
    certified_sd: np.ndarray
    statistics: dict[str, float]
    intercept: bool


def nist_set(name: str) -> NistSet:
    """The NIST StRD linear set ``name`` (one of :data:`NIST_LINEAR_SETS`)."""
    ref = load(f"nist-{name.lower()}.txt")
    meta = ref["meta"]
    assert isinstance(meta, dict)
    rows = ref["data"]
    assert isinstance(rows, list)
    y = np.array([float(r["y"]) for r in rows])
    x = np.column_stack([[float(r[c]) for r in rows] for c in meta["xcols"].split()])
    if meta["design"] == "polynomial":
        x = np.column_stack([x[:, 0] ** k for k in range(1, int(meta["degree"]) + 1)])
    intercept = meta["intercept"] == "yes"
    design = np.column_stack([np.ones(len(y)), x]) if intercept else x
    table = ref["certified_parameters"]
    assert isinstance(table, list)
    stats = ref["certified_statistics"]
    assert isinstance(stats, list)
    return NistSet(
        name=name,
        design=design,
        y=y,
        params=tuple(r["param"] for r in table),
        certified=np.array([float(r["estimate"]) for r in table]),
        certified_sd=np.array([float(r["std_dev"]) for r in table]),
        statistics={r["statistic"]: float(r["value"]) for r in stats},
        intercept=intercept,
    )
