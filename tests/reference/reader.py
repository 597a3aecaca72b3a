"""Parse the reference files in this folder (format described in each file's header).

Lines starting with '#' are comments; '[section]' starts a section; [meta] and
[dataset] hold 'key = value' lines, the other sections are CSV tables with a header row.
"""

from __future__ import annotations

import csv
from pathlib import Path

HERE = Path(__file__).parent


def load(name: str) -> dict[str, object]:
    """Sections of a reference file: dicts for key/value sections, lists of row dicts for tables."""
    sections: dict[str, list[str]] = {}
    current = None
    for raw in (HERE / name).read_text().splitlines():
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
