"""Fit designs one at a time or stacked, dropping rank-deficient terms per product.

``fit_design`` is the single-product path (Householder QR); ``fit_designs``
groups designs by their number of fitting rows and solves each group as one
stack (normal equations on centred, scaled columns with one refinement step).
Grouping by length was measured faster than zero-padding to a common length.
Poisson and 2SLS fits run product by product inside ``fit_designs``.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Final

import numpy as np

from models.design import Design, Term
from models.errors import InsufficientDataError, UnusableDataError
from models.estimate import Estimate, estimate_from_stack, fit_iv, fit_poisson
from models.ols import fit_ols_stack
from models.rank import redundant_columns
from models.spec import ModelSpec

MIN_RESIDUAL_DF: Final = 3
"""Residual degrees of freedom every fit must keep (so that t, F and the residual tests exist)."""


def required_obs(n_terms: int) -> int:
    """Fewest usable observations for a model with ``n_terms`` coefficients."""
    return n_terms + MIN_RESIDUAL_DF


@dataclass(frozen=True)
class DroppedTerm:
    """A term left out because the design cannot estimate it beside the others.

    ``partners`` names the terms it is a linear combination of; empty when it never varies.
    """

    term: Term
    partners: tuple[str, ...] = ()


@dataclass(frozen=True)
class FittedDesign:
    """A design (without any dropped terms) and its estimate."""

    design: Design
    estimate: Estimate
    dropped: tuple[DroppedTerm, ...]
    kept: tuple[int, ...]


def check_size(design: Design) -> None:
    """Raise :class:`InsufficientDataError` when the design has too few usable rows."""
    need = required_obs(len(design.terms))
    if design.n_usable < need:
        lost = []
        if design.n_stockouts:
            lost.append(f"{design.n_stockouts} out-of-stock")
        if design.n_zero_dropped:
            lost.append(f"{design.n_zero_dropped} zero-unit")
        if design.n_missing:
            lost.append(f"{design.n_missing} with missing values")
        detail = f"{design.n_window} periods in the window"
        if lost:
            detail += f", excluded: {', '.join(lost)}"
        raise InsufficientDataError(design.sku, design.n_usable, need, detail)


def _reduce(design: Design) -> tuple[Design, tuple[DroppedTerm, ...], tuple[int, ...]]:
    x, _ = design.fitting_rows()
    redundant = redundant_columns(x)
    if any(item.index == 1 for item in redundant):
        raise UnusableDataError(
            f"{design.sku}: the own price does not vary independently of the other terms in "
            "the fitted periods, so its effect cannot be estimated"
        )
    drop = {item.index for item in redundant}
    kept = tuple(j for j in range(len(design.terms)) if j not in drop)
    dropped = tuple(
        DroppedTerm(design.terms[item.index], tuple(design.terms[j].name for j in item.partners))
        for item in redundant
    )
    return (design.without_terms(drop) if drop else design), dropped, kept


def _estimate(design: Design, spec: ModelSpec, method: str) -> Estimate:
    x, y = design.fitting_rows()
    if design.form == "poisson":
        return fit_poisson(x, design.units[design.usable], cov_type=spec.standard_errors)
    if spec.instruments:
        assert design.instruments is not None
        return fit_iv(x, y, design.instruments[design.usable], cov_type=spec.standard_errors)
    stack = fit_ols_stack(x[None], y[None], cov_type=spec.standard_errors, method=method)
    return estimate_from_stack(stack, 0)


def fit_design(design: Design, spec: ModelSpec) -> FittedDesign:
    """Single-product path: size check, rank decision by pivoted QR, refined QR solve."""
    check_size(design)
    reduced, dropped, kept = _reduce(design)
    if dropped:
        check_size(reduced)
    return FittedDesign(reduced, _estimate(reduced, spec, "qr"), dropped, kept)


def fit_designs(designs: Sequence[Design], spec: ModelSpec) -> list[FittedDesign | Exception]:
    """Batched path: stack OLS designs with equal fitting length; others one by one.

    Products the stacked solver flags are refitted alone, where a pivoted QR decides
    which terms (if any) to drop, so one degenerate product never stops the batch.
    """
    results: list[FittedDesign | Exception] = [ValueError("not fitted")] * len(designs)
    groups: dict[tuple[int, int], list[int]] = defaultdict(list)
    for i, design in enumerate(designs):
        try:
            check_size(design)
        except InsufficientDataError as error:
            results[i] = error
            continue
        if design.form == "poisson" or spec.instruments:
            results[i] = _fit_or_error(design, spec)
        else:
            groups[(design.n_usable, len(design.terms))].append(i)
    for members in groups.values():
        rows = [designs[i].fitting_rows() for i in members]
        stack = fit_ols_stack(
            np.stack([r[0] for r in rows]),
            np.stack([r[1] for r in rows]),
            cov_type=spec.standard_errors,
            method="normal",
        )
        deficient = set(stack.rank_deficient.tolist())
        all_kept = tuple(range(len(designs[members[0]].terms)))
        for position, i in enumerate(members):
            if position in deficient:
                results[i] = _fit_or_error(designs[i], spec)
            else:
                results[i] = FittedDesign(
                    designs[i], estimate_from_stack(stack, position), (), all_kept
                )
    return results


def _fit_or_error(design: Design, spec: ModelSpec) -> FittedDesign | Exception:
    try:
        return fit_design(design, spec)
    except (ValueError, np.linalg.LinAlgError) as error:
        return error


def head(design: Design, n_rows: int) -> Design:
    """The first ``n_rows`` rows of a design (training part of a time split)."""
    return replace(
        design,
        periods=design.periods[:n_rows],
        regressors=design.regressors[:n_rows],
        response=design.response[:n_rows],
        units=design.units[:n_rows],
        usable=design.usable[:n_rows],
        variables={k: v[:n_rows] for k, v in design.variables.items()},
        instruments=None if design.instruments is None else design.instruments[:n_rows],
        n_stockouts=0,
        n_missing=0,
        n_zero_dropped=int((~design.usable[:n_rows]).sum()),
    )
