"""Choose a demand form by rolling-origin out-of-sample error on units.

Each candidate is refitted on an expanding window and scored on the next block
of periods, never on earlier ones (random k-fold would leak the future). Log
forms are retransformed with Duan's smearing factor before comparison, so every
candidate is judged on the same units scale by WAPE.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
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


@dataclass(frozen=True)
class FormScores:
    """Rolling-origin scores of the candidate forms of one history.

    ``overall``: each form's WAPE over all scored folds (None: could not be scored);
    ``by_fold``: each scored form's WAPE fold by fold, over the folds every form could be
    scored on, oldest first (the paired errors the steady choice compares);
    ``likelihood``: each least-squares form's log-likelihood on the units scale over the
    whole window (see :func:`units_log_likelihood`), where the forms fit the same periods.
    """

    overall: dict[str, float | None]
    by_fold: dict[str, tuple[float, ...]]
    likelihood: dict[str, float] = field(default_factory=dict)


def units_log_likelihood(fitted: FittedDesign) -> float | None:
    """Normal log-likelihood of the units, up to a constant shared by the forms.

    ``-n/2 ln(mean residual^2)`` for ``linear``; for the log-response forms the same on
    the log scale less ``sum ln(units)``, the Jacobian that turns a density of
    ``ln(units)`` into one of units (Box & Cox 1964, JRSS B 26, 211-252, section 3), so
    that the forms compare on one scale. None when a period had to be left out (zero
    units under a log form) or the form is ``poisson`` (a count model, no density).
    """
    design = fitted.design
    if design.form not in BASE_CANDIDATES or not bool(np.all(design.usable)):
        return None
    resid = fitted.estimate.resid
    mean_square = float(np.mean(resid**2))
    if not mean_square > 0.0:
        return None
    value = -0.5 * resid.size * np.log(mean_square)
    if design.form in LOG_RESPONSE_FORMS:
        value -= float(np.sum(design.response))
    return float(value) if np.isfinite(value) else None


def score_forms(
    histories: Sequence[History], spec: ModelSpec
) -> list[dict[str, float | None] | Exception]:
    """Rolling-origin WAPE of every candidate form per history (or the error that stopped it)."""
    return [
        s if isinstance(s, Exception) else s.overall for s in score_forms_by_fold(histories, spec)
    ]


def score_forms_by_fold(
    histories: Sequence[History], spec: ModelSpec
) -> list[FormScores | Exception]:
    """:func:`score_forms` with each form's WAPE per fold kept as well."""
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

    likelihoods: list[dict[str, float]] = [{} for _ in histories]
    members = [i for i, d in enumerate(base) if isinstance(d, dict)]
    for form in BASE_CANDIDATES if members else ():
        whole = [entry[form] for entry in base if isinstance(entry, dict)]
        for i, result in zip(members, fit_designs(whole, spec.with_form(form)), strict=True):
            value = units_log_likelihood(result) if isinstance(result, FittedDesign) else None
            if value is not None:
                likelihoods[i][form] = value

    out: list[FormScores | Exception] = []
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
        by_fold: dict[str, tuple[float, ...]] = {}
        for form, folds in per_form.items():
            pairs = [folds[f] for f in valid]
            abs_error = sum(pair[0] for pair in pairs if pair is not None)
            total = sum(pair[1] for pair in pairs if pair is not None)
            scores[form] = abs_error / total if total > 0 else None
            fold_wapes = tuple(p[0] / p[1] if p is not None and p[1] > 0 else np.nan for p in pairs)
            if scores[form] is not None and all(np.isfinite(fold_wapes)):
                by_fold[form] = fold_wapes
        out.append(FormScores(scores, by_fold, likelihoods[i]))
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


PREFERENCE: Final = ("poisson", "log-log", "semi-log", "linear")
"""Order among forms the hold-out and the likelihood cannot tell apart (our convention):
``poisson`` first (it is a candidate only when some periods sold nothing, which the log
forms must leave out), then the constant-elasticity form."""


def steady_form(scores: FormScores, previous: str | None = None) -> str:
    """The form to fit under ``auto``: the lowest WAPE unless it is within noise of others.

    1. The forms *within noise* of the best (lowest WAPE) are those whose WAPE exceeds
       the best's by no more than one standard error of their fold-by-fold differences
       (the one-standard-error rule of Hastie, Tibshirani & Friedman, *The Elements of
       Statistical Learning*, 2nd ed., section 7.10, applied to paired fold errors).
    2. Among the best and those forms, ``previous`` (the form of the product's earlier
       fit) is kept when it is one of them;
    3. else ``poisson`` when it is one of them (the window has periods without sales);
    4. else the form with the highest likelihood of the units over the whole window
       (:func:`units_log_likelihood`), which uses every period rather than the last few;
    5. else (no likelihoods to compare) the first in :data:`PREFERENCE`.

    Examples
    --------
    >>> close = FormScores(
    ...     {"log-log": 0.101, "semi-log": 0.100, "linear": 0.140},
    ...     {"log-log": (0.09, 0.11, 0.10, 0.11), "semi-log": (0.10, 0.10, 0.09, 0.11),
    ...      "linear": (0.13, 0.15, 0.14, 0.14)},
    ...     {"log-log": -120.0, "semi-log": -118.5, "linear": -140.0},
    ... )
    >>> choose_form(close.overall), steady_form(close), steady_form(close, previous="log-log")
    ('semi-log', 'semi-log', 'log-log')
    >>> steady_form(FormScores(close.overall, close.by_fold, {"log-log": -110.0}))
    'log-log'
    """
    best = choose_form(scores.overall)
    base = scores.by_fold.get(best)
    if base is None or len(base) < 2:
        return best
    near = [best]
    for form, values in scores.by_fold.items():
        score, best_score = scores.overall.get(form), scores.overall[best]
        if form == best or score is None or best_score is None:
            continue
        diff = np.asarray(values) - np.asarray(base)
        noise = float(np.std(diff, ddof=1) / np.sqrt(diff.size))
        if score - best_score <= noise:
            near.append(form)
    if previous in near:
        return str(previous)
    if "poisson" in near:
        return "poisson"
    rated = [f for f in near if f in scores.likelihood]
    if rated:
        return max(rated, key=lambda f: (scores.likelihood[f], -near.index(f)))
    return min(near, key=lambda f: PREFERENCE.index(f) if f in PREFERENCE else len(PREFERENCE))
