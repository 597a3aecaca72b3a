"""Read the reference files of tests/reference/ (format described in each file's header).

Lines starting with '#' are comments; '[section]' starts a section; [meta] and
[dataset] hold 'key = value' lines, the other sections are CSV tables with a header row.
Helper: ``load(name)``; fixture: ``reference_data`` (the same reader).
"""

from __future__ import annotations

import csv
from collections.abc import Callable
from pathlib import Path

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
