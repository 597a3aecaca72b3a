"""The stacked batch path equals the single-product path, and fit records serialise as before.

The reference here is :func:`models.fit_demand`, itself checked against statsmodels and
the NIST certified values in test_fit_statsmodels.py and test_fit_reference.py. The
batch mixes the cases that take products off the common path: stockouts, missing
covariate values, zero units under a log form, a constant covariate (a term to drop),
different history lengths, a hold-out whose training periods lose a term, and products
that cannot be fitted at all.
"""

from __future__ import annotations

import gc
import json
import math
from dataclasses import fields, replace
from typing import Any

import numpy as np
import pytest

from models import DemandFit, FitFailure, History, ModelSpec, fit_demand, fit_many
from models.batch import fit_stacked
from models.result import _PLAIN_NUMBERS as PLAIN_NOTE
from models.result import Coefficient, Quality, build_records, clean
from tests.plugins.fit_cases import SPEC, clean_history

RTOL = 1e-12


def _mixed_batch() -> list[History]:
    """Products named by what makes them special; the plain ones take the common path."""
    plain = [clean_history(seed) for seed in range(6)]
    stockouts = clean_history(20)
    in_stock = np.ones(104, dtype=bool)
    in_stock[[3, 50, 90]] = False
    sold_out = stockouts.units.copy()
    sold_out[[3, 50, 60]] = 0.0  # two stockout weeks sold nothing; week 60 is a plain zero
    sold_out[70] = np.nan  # units not recorded
    zeros = clean_history(21)
    units = zeros.units.copy()
    units[[5, 99]] = 0.0
    missing = clean_history(22)
    rival = missing.covariates["rival"].copy()
    rival[[7, 100]] = np.nan
    late_promo = clean_history(23)
    promo = np.zeros(104)
    promo[[95, 98, 101]] = 1.0  # only inside the default 13-week hold-out
    constant = clean_history(24)
    batch = [
        *plain,
        replace(stockouts, in_stock=in_stock, units=sold_out),
        replace(zeros, units=units),
        replace(missing, covariates={**missing.covariates, "rival": rival}),
        replace(late_promo, covariates={**late_promo.covariates, "promo": promo}),
        replace(constant, covariates={**constant.covariates, "promo": np.full(104, 1.0)}),
        clean_history(25, n=60),
        clean_history(26, n=130),  # longer than the 104-period window
        clean_history(27, n=5),  # too short: a failure
        replace(clean_history(28), price=np.full(104, 4.0)),  # price never varies
    ]
    return [replace(h, sku=f"TEA-{i:02d}") for i, h in enumerate(batch)]


def _assert_same(a: Any, b: Any, where: str = "") -> None:
    """Equal structure, text and integers exactly; floats to RTOL relative."""
    if isinstance(a, dict):
        assert isinstance(b, dict) and list(a) == list(b), where
        for key in a:
            _assert_same(a[key], b[key], f"{where}/{key}")
    elif isinstance(a, list):
        assert isinstance(b, list) and len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _assert_same(x, y, f"{where}[{i}]")
    elif isinstance(a, float) and isinstance(b, float):
        assert math.isclose(a, b, rel_tol=RTOL, abs_tol=0.0), (where, a, b)
    else:
        assert type(a) is type(b) and a == b, (where, a, b)


def _assert_batch_matches(histories: list[History], spec: ModelSpec, **options: Any) -> None:
    fits = fit_many(histories, spec, **options)
    for history, fit in zip(histories, fits, strict=True):
        try:
            single = fit_demand(history, spec, **options)
        except ValueError as error:
            assert isinstance(fit, FitFailure), history.sku
            assert (fit.error, fit.reason) == (type(error).__name__, str(error))
            continue
        assert isinstance(fit, DemandFit), history.sku
        _assert_same(fit.to_dict(), single.to_dict(), history.sku)


@pytest.mark.parametrize(
    ("form", "errors"),
    [("log-log", "hc3"), ("semi-log", "classical"), ("linear", "hac"), ("log-log", "hac")],
)
def test_batch_equals_single_product_fits(form: str, errors: str) -> None:
    _assert_batch_matches(_mixed_batch(), replace(SPEC, form=form, standard_errors=errors))


def test_common_cases_take_the_stacked_path() -> None:
    # Without this, the comparison above could pass with every product fitted alone.
    histories = _mixed_batch()
    stacked = fit_stacked(
        histories, SPEC, "log-log", holdout_periods=None, candidate_scores=[{}] * len(histories)
    )
    alone = {h.sku for h, fit in zip(histories, stacked, strict=True) if fit is None}
    assert alone == {"TEA-10", "TEA-13", "TEA-14"}  # constant term, too short, flat price
    codes = {f.sku: {w.code for w in f.warnings} for f in stacked if f is not None}
    assert {"stockouts_excluded", "zero_units_dropped", "missing_values_dropped"} <= codes["TEA-06"]
    assert "zero_units_dropped" in codes["TEA-07"]
    assert "missing_values_dropped" in codes["TEA-08"]
    fit = next(f for f in stacked if f is not None and f.sku == "TEA-12")
    assert fit.window.n_window == 104
    assert fit.window.first_period == str(histories[12].periods[26])
    # The late-promotion product's hold-out fit drops the promotion term, as fit_demand's does.
    late = next(f for f in stacked if f is not None and f.sku == "TEA-09")
    assert late.quality.holdout_wape is not None
    assert late.quality.holdout_wape == fit_demand(histories[9], SPEC).quality.holdout_wape


def test_batch_equals_single_with_seasons_trend_and_explicit_holdout() -> None:
    spec = replace(SPEC, seasonality="month", trend=True, window_periods=80)
    for holdout in (0, 20, 90):
        _assert_batch_matches(_mixed_batch(), spec, holdout_periods=holdout)
    _assert_batch_matches(_mixed_batch()[:3], replace(SPEC, form="auto"))


def field_by_field(fit: DemandFit) -> dict[str, Any]:
    """The plain serialisation: every field through ``clean`` (records through their fields)."""
    out: dict[str, Any] = {}
    for f in fields(fit):
        value = getattr(fit, f.name)
        if f.name == "spec":
            out[f.name] = value.to_dict()
        elif f.name == "terms":
            out[f.name] = [t.to_dict() for t in value]
        elif f.name in ("coefficients", "warnings"):
            out[f.name] = [clean(vars(row)) for row in value]
        elif f.name in ("quality", "diagnostics", "window", "pooled"):
            out[f.name] = None if value is None else clean(vars(value))
        else:
            out[f.name] = clean(value)
    return out


def _records_with_gaps() -> list[DemandFit]:
    histories = [clean_history(seed) for seed in range(4)]
    pooled = fit_many(histories, replace(SPEC, pooling="family"))
    fits = [f for f in pooled if isinstance(f, DemandFit)]
    fits.append(fit_demand(histories[0], replace(SPEC, form="poisson")))  # NaN figures
    fits.append(fit_demand(histories[1], replace(SPEC, form="auto")))
    fits.append(fit_demand(histories[2], replace(SPEC, instruments=("unit_cost",))))
    # Hand-made gaps: infinities, numpy scalars, a NaN in the covariance.
    odd = fits[0]
    row = replace(odd.coefficients[1], t_stat=math.inf, vif=np.float64(2.5))
    covariance = [list(r) for r in odd.covariance]
    covariance[0][0] = math.nan
    fits.append(
        replace(
            odd,
            coefficients=(odd.coefficients[0], row, *odd.coefficients[2:]),
            covariance=tuple(tuple(r) for r in covariance),
            quality=replace(odd.quality, sigma=np.float64(0.5)),
            variable_means={**odd.variable_means, "price": math.nan},
            price_range=(np.float64(1.0), 2.0),
            smearing=math.inf,
        )
    )
    return fits


def test_to_dict_equals_the_field_by_field_serialisation() -> None:
    for fit in _records_with_gaps():
        data = fit.to_dict()
        reference = field_by_field(fit)
        assert data == reference
        assert json.dumps(data, allow_nan=False) == json.dumps(reference, allow_nan=False)


def test_collector_state_is_restored() -> None:
    histories = _mixed_batch()[:2]
    assert gc.isenabled()
    fit_many(histories, SPEC)
    assert gc.isenabled()
    gc.disable()
    try:
        fit_many(histories, SPEC)
        assert not gc.isenabled()
    finally:
        gc.enable()


def test_batched_records_serialise_as_field_by_field_with_and_without_gaps() -> None:
    # A promotion flag set in one period only has leverage 1: its HC3 figures are NaN.
    spec = replace(SPEC, covariates=("rival", "promo", "flag"))
    histories = []
    for seed, weeks in ((30, [40]), (31, [10, 40, 70])):
        h = clean_history(seed)
        flag = np.zeros(104)
        flag[weeks] = 1.0
        histories.append(replace(h, covariates={**h.covariates, "flag": flag}))
    gap, plain = fit_many(histories, spec)
    assert isinstance(gap, DemandFit) and isinstance(plain, DemandFit)
    assert not math.isfinite(gap.coefficient("flag").std_error)
    assert not vars(gap).get(PLAIN_NOTE) and vars(plain).get(PLAIN_NOTE) is True
    for fit in (gap, plain):
        assert fit.to_dict() == field_by_field(fit)
        assert json.dumps(fit.to_dict(), allow_nan=False)
    assert gap.to_dict() == fit_demand(histories[0], spec).to_dict()


def test_from_dict_restores_batched_records() -> None:
    histories = _mixed_batch()
    for fit in fit_many(histories, SPEC):
        if isinstance(fit, DemandFit):
            assert DemandFit.from_dict(json.loads(json.dumps(fit.to_dict()))) == fit


def test_build_records_equals_init() -> None:
    values = {
        "n_obs": [104, 90],
        "r_squared": [0.9, None],
        "adj_r_squared": [0.89, None],
        "f_stat": [12.0, 3.0],
        "f_p_value": [1e-9, 0.04],
        "sigma": [0.2, 0.3],
        "aic": [-50.0, None],
        "holdout_wape": [0.1, 0.2],
    }
    built = build_records(Quality, 2, values, {"bic": -40.0})
    made = [Quality(**{k: v[i] for k, v in values.items()}, bic=-40.0) for i in range(2)]
    assert built == made
    assert [list(vars(q)) for q in built] == [list(vars(q)) for q in made]
    with pytest.raises(ValueError, match="exactly once"):
        build_records(Quality, 2, values)
    with pytest.raises(ValueError, match="needs 3 values"):
        build_records(Quality, 3, values, {"bic": -40.0})
    names = [f.name for f in fields(Coefficient)]
    rows = build_records(Coefficient, 1, {name: [0.5] for name in names[1:]}, {"term": "x"})
    assert rows == [Coefficient("x", 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5)]
