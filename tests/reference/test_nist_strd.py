"""All eleven NIST StRD linear least squares sets against their certified values.

Source of every certified value: NIST/ITL Statistical Reference Datasets, Linear Least
Squares Regression (https://www.itl.nist.gov/div898/strd/lls/lls.shtml), copied into
tests/reference/nist-<name>.txt with the stored copy each was read from named in its
header (Norris, NoInt1, NoInt2, Filip, Longley: joshday/NISTStatisticalReferenceData.jl;
Pontius, Wampler1-5: KDE/labplot tests/analysis/fit/FitTest.cpp).

Accuracy is NIST's log relative error (LRE, the number of agreeing significant digits;
for a certified value of exactly 0 the absolute error, as NIST does). Required: LRE >= 9
on coefficients, standard errors, residual SD and R-squared for every set, except Filip,
where LRE >= 7: its degree-10 design cannot be held exactly in double precision (x**k
rounded to 53 bits), and the certified values move in the 8th digit under perturbations of
that size, so no method fed the rounded design can promise more (statsmodels' QR gets 7.9
on the coefficients and none on the standard errors).

Paths:
* the fitting paths the API uses, ``fit_demand`` (one product) and ``fit_many`` (batched,
  beside other sets of other lengths and a second copy), with x as the own price and its
  powers or the other regressors as level covariates of a linear fit: every set with an
  intercept and non-negative y (Norris, Pontius, Filip, Longley, Wampler1, Wampler2);
* the library's least-squares core, ``fit_ols_stack``, alone and stacked: every set with an
  intercept, including Wampler3-5, whose negative y the API refuses as units;
* NoInt1 and NoInt2 (regression through the origin, which no demand form expresses): the
  library's refinement (``models.refine.refine``) from a Householder QR start.

``python -m tests.reference.test_nist_strd`` prints the LRE table.
"""

from __future__ import annotations

import math
from functools import cache

import numpy as np
import pytest

from models import DemandFit, History, ModelSpec, fit_demand, fit_many
from models.ols import fit_ols_stack
from models.refine import refine
from tests.plugins.reference_data import NIST_LINEAR_SETS, NistSet, nist_set

API_SETS = ("Norris", "Pontius", "Filip", "Longley", "Wampler1", "Wampler2")
CORE_SETS = tuple(n for n in NIST_LINEAR_SETS if not n.startswith("NoInt"))
REQUIRED = {"Filip": 7.0}  # NIST StRD certified values; 9 digits elsewhere (issue #14)
DEFAULT_REQUIRED = 9.0


def lre(estimate: float, certified: float) -> float:
    """NIST's log relative error, absolute when the certified value is 0; 15 at most."""
    error = abs(estimate - certified)
    if certified != 0.0:
        error /= abs(certified)
    return 15.0 if error == 0.0 else min(15.0, -math.log10(error))


def _history(case: NistSet, sku: str) -> History:
    x = case.design[:, 1:]
    n = len(case.y)
    start = np.datetime64("2001-01-01")
    return History(
        sku=sku,
        periods=np.arange(start, start + 7 * n, 7),
        price=x[:, 0].copy(),
        units=case.y.copy(),
        unit_cost=np.full(n, np.nan),
        in_stock=np.ones(n, dtype=bool),
        covariates={f"x{j + 1}": x[:, j].copy() for j in range(1, x.shape[1])},
    )


def _spec(case: NistSet) -> ModelSpec:
    covariates = tuple(f"x{j + 1}" for j in range(1, case.design.shape[1] - 1))
    return ModelSpec(form="linear", covariates=covariates, standard_errors="classical")


@cache
def _api_fits() -> dict[tuple[str, str], DemandFit]:
    out: dict[tuple[str, str], DemandFit] = {}
    for name in API_SETS:
        case = nist_set(name)
        spec = _spec(case)
        out[(name, "fit_demand")] = fit_demand(_history(case, name), spec)
        # Batched beside Norris (another length; its covariates ignored) and a second copy.
        other = nist_set("Norris" if name != "Norris" else "Longley")
        other_history = _history(other, "OTHER")
        other_history = History(
            sku="OTHER",
            periods=other_history.periods,
            price=other_history.price,
            units=other_history.units,
            unit_cost=other_history.unit_cost,
            in_stock=other_history.in_stock,
            covariates={
                c: np.linspace(1.0, 2.0, len(other.y)) ** (i + 2)
                for i, c in enumerate(spec.covariates)
            },
        )
        batch = fit_many([other_history, _history(case, name), _history(case, name + "-2")], spec)
        for label, fit in (("fit_many", batch[1]), ("fit_many copy", batch[2])):
            assert isinstance(fit, DemandFit), fit
            out[(name, label)] = fit
    return out


def _core(name: str, stacked: bool) -> tuple[np.ndarray, np.ndarray, float, float]:
    """Coefficients, standard errors, residual SD and R-squared from ``fit_ols_stack``."""
    case = nist_set(name)
    members = [case]
    if stacked:
        # The three other sets of the same shape (Wampler1-5 share 21 rows and 6 columns),
        # or the same set twice.
        same = [n for n in CORE_SETS if n != name and nist_set(n).design.shape == case.design.shape]
        members += [nist_set(n) for n in same] or [case]
    stack = fit_ols_stack(
        np.stack([m.design for m in members]), np.stack([m.y for m in members]), method="qr"
    )
    assert stack.rank_deficient.size == 0
    return stack.params[0], stack.bse[0], float(stack.sigma[0]), float(stack.r_squared[0])


def _through_origin(name: str) -> tuple[np.ndarray, np.ndarray, float]:
    case = nist_set(name)
    x, y = case.design[None], case.y[None]
    q, r = np.linalg.qr(x)
    start = np.linalg.solve(r, np.einsum("bnk,bn->bk", q, y)[:, :, None])[:, :, 0]
    params, resid = refine(x.transpose(0, 2, 1), y, start, q, r)
    n, k = case.design.shape
    sigma = math.sqrt(float(resid[0] @ resid[0]) / (n - k))
    r_inv = np.linalg.inv(r[0])
    bse = sigma * np.sqrt(np.sum(r_inv**2, axis=1))
    return params[0], bse, sigma


def _digits(case: NistSet, params, bse, sigma, r_squared=None) -> dict[str, float]:
    out = {
        "coefficients": min(map(lre, params, case.certified)),
        "std_errors": min(map(lre, bse, case.certified_sd)),
        "residual_sd": lre(sigma, case.statistics["residual_sd"]),
    }
    if r_squared is not None:
        out["r_squared"] = lre(r_squared, case.statistics["r_squared"])
    return out


def lre_table() -> list[tuple[str, str, dict[str, float]]]:
    """The LRE of every set through every path it is checked on (printed by the tests)."""
    rows = []
    for name in NIST_LINEAR_SETS:
        case = nist_set(name)
        if not case.intercept:
            rows.append((name, "refine", _digits(case, *_through_origin(name))))
            continue
        for stacked in (False, True):
            params, bse, sigma, r2 = _core(name, stacked)
            label = "fit_ols_stack" + (" stacked" if stacked else "")
            rows.append((name, label, _digits(case, params, bse, sigma, r2)))
        if name in API_SETS:
            for (set_name, label), fit in _api_fits().items():
                if set_name == name:
                    params = [c.estimate for c in fit.coefficients]
                    bse = [c.std_error for c in fit.coefficients]
                    figures = _digits(case, params, bse, fit.quality.sigma, fit.quality.r_squared)
                    rows.append((name, label, figures))
    return rows


def _print_table(rows: list[tuple[str, str, dict[str, float]]]) -> None:
    print("\nNIST StRD linear sets: log relative error (digits) per path")
    for name, path, digits in rows:
        figures = "  ".join(f"{k} {v:5.1f}" for k, v in digits.items())
        print(f"{name:9s} {path:18s} {figures}")


@pytest.mark.parametrize("name", NIST_LINEAR_SETS)
def test_certified_digits_on_every_path(name: str) -> None:
    # Source: NIST StRD certified values (tests/reference/nist-<name>.txt).
    rows = [row for row in lre_table() if row[0] == name]
    _print_table(rows)
    required = REQUIRED.get(name, DEFAULT_REQUIRED)
    assert rows
    for _, path, digits in rows:
        for quantity, value in digits.items():
            assert value >= required, (name, path, quantity, round(value, 2), required)


def test_filip_keeps_every_term_and_says_it_is_nearly_collinear() -> None:
    # Source: NIST StRD Filip (a full-rank degree-10 polynomial). Every one of the 11
    # certified terms is estimated; none is dropped.
    for (name, _), fit in _api_fits().items():
        if name == "Filip":
            assert len(fit.coefficients) == 11
            codes = {w.code for w in fit.warnings}
            assert "terms_dropped" not in codes and "near_collinear" in codes


def test_api_paths_cover_every_set_the_api_can_express() -> None:
    # A set the demand forms can express: an intercept and non-negative units.
    for name in NIST_LINEAR_SETS:
        case = nist_set(name)
        expressible = case.intercept and bool(np.all(case.y >= 0.0))
        assert expressible == (name in API_SETS), name


if __name__ == "__main__":
    _print_table(lre_table())
