"""What a refit job fits together: candidates grouped by spec into batches."""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from models import UNIT_COST, ModelSpec, SpecError


@dataclass(frozen=True)
class Candidate:
    id: int
    sku: str
    family: str | None
    spec: dict[str, Any]
    # The spec as canonical JSON: products whose keys are equal are fitted together.
    key: str = ""
    # The form of the product's active fit, kept by `auto` when the scores cannot tell it
    # from the best (see docs/estimation.md, Choosing the form).
    previous_form: str | None = None


@dataclass(frozen=True)
class Batch:
    """Products fitted and written together: a spec, or why their spec is invalid."""

    members: Sequence[Candidate]
    spec: ModelSpec | None
    invalid: str = ""


def make_batches(candidates: Sequence[Candidate], size: int) -> list[Batch]:
    groups: dict[str, list[Candidate]] = defaultdict(list)
    for candidate in candidates:
        groups[candidate.key or json.dumps(candidate.spec, sort_keys=True)].append(candidate)
    out = []
    for key, members in groups.items():
        try:
            spec = ModelSpec.from_dict(json.loads(key))
        except SpecError as exc:
            out.append(Batch(members, None, str(exc)))
            continue
        out += [Batch(members[i : i + size], spec) for i in range(0, len(members), size)]
    return out


def covariates_used(spec: ModelSpec) -> list[str]:
    """The covariates a fit under ``spec`` reads: its terms, and its instruments other
    than the unit cost (which has a column of its own)."""
    instruments = [name for name in spec.instruments if name != UNIT_COST]
    return list(dict.fromkeys([*spec.covariates, *instruments]))
