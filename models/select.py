"""Choose a demand form by rolling-origin out-of-sample error on units.

Each candidate is refitted on an expanding window and scored on the next block
of periods, never on earlier ones (random k-fold would leak the future). Log
forms are retransformed with Duan's smearing factor before comparison, so every
candidate is judged on the same units scale by WAPE.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Final

import numpy as np

from models.design import Design, build_design
from models.engine import FittedDesign, fit_designs, head, required_obs
from models.errors import InsufficientDataError
from models.forecast import expected_units, smearing_factor
from models.history import History
from models.spec import LOG_RESPONSE_FORMS, ModelSpec

BASE_CANDIDATES: Final = ("log-log", "semi-log", "linear")
"""Always compared; poisson joins when the window has zero-unit periods; ties go to the earlier."""
FOLDS: Final = 4
MAX_HORIZON: Final = 13


def fold_ends(n_rows: int) -> list[tuple[int, int]]:
    """(training end, test end) row indices of the rolling origins, oldest first."""
    horizon = max(1, min(MAX_HORIZON, n_rows // 10))
    return [
        (n_rows - (FOLDS - f) * horizon, n_rows - (FOLDS - f - 1) * horizon) for f in range(FOLDS)
    ]


def score_forms(
    histories: Sequence[History], spec: ModelSpec
) -> list[dict[str, float | None] | Exception]:
    """Rolling-origin WAPE of every candidate form per history (or the error that stopped it)."""
    base: list[dict[str, Design] | Exception] = []
    for history in histories:
        try:
            designs = {form: build_design(history, spec, form) for form in BASE_CANDIDATES}
            if np.any(designs["linear"].units == 0.0):
                designs["poisson"] = build_design(history, spec, "poisson")
            base.append(designs)
        except ValueError as error:
            base.append(error)

    # errors[i][form][fold] = (sum |error|, sum |units|) or None when that fold could not be fitted
    errors: list[dict[str, list[tuple[float, float] | None]]] = [{} for _ in histories]
    # The first reason other than too few rows that stopped a fold, per history.
    obstacles: list[Exception | None] = [None] * len(histories)
    for form in (*BASE_CANDIDATES, "poisson"):
        members = [i for i, d in enumerate(base) if isinstance(d, dict) and form in d]
        if not members:
            continue
        for fold in range(FOLDS):
            train, tests = [], []
            for i in members:
                entry = base[i]
                assert isinstance(entry, dict)
                design = entry[form]
                ends = fold_ends(design.regressors.shape[0])[fold]
                train.append(head(design, max(ends[0], 0)))
                tests.append((design, ends))
            fitted = fit_designs(train, spec.with_form(form))
            for i, result, (design, (start, stop)) in zip(members, fitted, tests, strict=True):
                errors[i].setdefault(form, [])
                if isinstance(result, FittedDesign) and start > 0:
                    units = design.units[start:stop]
                    predicted = _predict(result, design, start, stop)
                    errors[i][form].append(
                        (float(np.sum(np.abs(units - predicted))), float(np.sum(units)))
                    )
                else:
                    errors[i][form].append(None)
                    if isinstance(result, Exception) and not isinstance(
                        result, InsufficientDataError
                    ):
                        obstacles[i] = obstacles[i] or result

    out: list[dict[str, float | None] | Exception] = []
    for i, entry in enumerate(base):
        if isinstance(entry, Exception):
            out.append(entry)
            continue
        per_form = errors[i]
        valid = [f for f in range(FOLDS) if all(per_form[form][f] is not None for form in per_form)]
        if not valid:
            linear = entry["linear"]
            required = _auto_required(len(linear.terms))
            found = obstacles[i]
            if found is not None and linear.n_usable >= required:
                out.append(found)  # enough rows: the data itself is the obstacle
                continue
            out.append(
                InsufficientDataError(
                    linear.sku,
                    linear.n_usable,
                    required,
                    "auto needs enough periods to score every form out of sample",
                )
            )
            continue
        scores: dict[str, float | None] = {}
        for form, folds in per_form.items():
            pairs = [folds[f] for f in valid]
            abs_error = sum(pair[0] for pair in pairs if pair is not None)
            total = sum(pair[1] for pair in pairs if pair is not None)
            scores[form] = abs_error / total if total > 0 else None
        out.append(scores)
    return out


def _auto_required(n_terms: int) -> int:
    """Fewest observations for which at least the last rolling origin can be fitted."""
    m = required_obs(n_terms) + 1
    while fold_ends(m)[-1][0] < required_obs(n_terms):
        m += 1
    return m


def _predict(result: FittedDesign, design: Design, start: int, stop: int) -> np.ndarray:
    estimate = result.estimate
    smearing = smearing_factor(estimate.resid) if result.design.form in LOG_RESPONSE_FORMS else None
    rows = design.regressors[start:stop][:, list(result.kept)]
    return expected_units(result.design.form, rows, estimate.params, smearing)


def choose_form(scores: dict[str, float | None]) -> str:
    """The candidate with the lowest WAPE (earlier candidates win ties)."""
    ranked = [(s, i, f) for i, (f, s) in enumerate(scores.items()) if s is not None]
    if not ranked:
        raise ValueError("no candidate form could be scored")
    return min(ranked)[2]
