"""What a write of observations did: rows taken, inserted, updated, products created.

Every path that stores observations (a JSON batch, a CSV file read column by column or
row by row) answers with this record.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class UpsertOutcome:
    rows: int
    inserted: int
    updated: int
    products_created: list[str] = field(default_factory=list)
