"""Batched least squares against a per-product statsmodels loop, measured in the same run.

Fits N products x 104 weekly periods of a log-log demand equation with 8 regressors
(own price, two cross prices, rival price, ad spend in logs; promotion, holiday and a
trend in levels) twice over the same pre-split arrays:

* baseline: ``sm.OLS(y, X).fit()`` per product, reading params, bse, pvalues, rsquared;
* batched: ``models.fit_ols_stack`` on the whole stack (all statistics of a fit record:
  coefficients, covariance, p-values, R-squared, F, AIC/BIC, VIF, condition number,
  Durbin-Watson, Breusch-Pagan, Jarque-Bera).

Prints products per second, the speed ratio and the largest relative difference
(coefficients relative to their standard error). ``--end-to-end`` also times
``models.fit_many`` from History objects (design building and fit records included).

Usage: python bench/fit.py [--products N] [--repeat R] [--end-to-end]
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import statsmodels.api as sm

from models import History, ModelSpec, fit_many, fit_ols_stack

N_PERIODS = 104


def make_arrays(n_products: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    shape = (n_products, N_PERIODS)
    log_price = np.log(rng.uniform(4, 12, (n_products, 1))) + rng.normal(0, 0.12, shape)
    cross_a = rng.normal(0, 0.1, shape) + np.log(8.0)
    cross_b = rng.normal(0, 0.1, shape) + np.log(6.0)
    rival = rng.normal(0, 0.05, shape)
    ads = np.log(200 + rng.gamma(2.0, 40.0, shape))
    promo = (rng.random(shape) < 0.1).astype(float)
    promo[:, 10] = 1.0  # every product has at least one promotion week
    weeks = np.arange(N_PERIODS) % 52
    holiday = np.broadcast_to(((weeks >= 49) | (weeks == 18)).astype(float), shape)
    trend = np.broadcast_to(np.arange(N_PERIODS) / 52.0, shape)
    regressors = np.stack([log_price, cross_a, cross_b, rival, ads, promo, holiday, trend], axis=2)
    design = np.concatenate([np.ones((*shape, 1)), regressors], axis=2)
    beta = np.array([4.0, -2.0, 0.4, 0.2, 0.8, 0.08, 0.2, 0.3, 0.02])
    response = design @ beta + rng.normal(0, 0.2, shape)
    return np.ascontiguousarray(design), np.ascontiguousarray(response)


def baseline(design: np.ndarray, response: np.ndarray) -> dict[str, np.ndarray]:
    out: dict[str, list[np.ndarray]] = {"params": [], "bse": [], "pvalues": [], "rsquared": []}
    for x, y in zip(design, response, strict=True):
        res = sm.OLS(y, x).fit()
        out["params"].append(res.params)
        out["bse"].append(res.bse)
        out["pvalues"].append(res.pvalues)
        out["rsquared"].append(np.array(res.rsquared))
    return {k: np.array(v) for k, v in out.items()}


def histories(design: np.ndarray, response: np.ndarray) -> list[History]:
    periods = np.arange(np.datetime64("2023-01-02"), np.datetime64("2023-01-02") + 7 * N_PERIODS, 7)
    names = ("cross_a", "cross_b", "rival", "ads", "promo", "holiday", "weeks")
    out = []
    for i, (x, y) in enumerate(zip(design, response, strict=True)):
        covs = {name: x[:, j + 2] for j, name in enumerate(names)}
        covs.update({n: np.exp(covs[n]) for n in ("cross_a", "cross_b", "rival", "ads")})
        out.append(
            History(
                f"SKU-{i:05d}",
                periods,
                np.exp(x[:, 1]),
                np.exp(y),
                np.full(N_PERIODS, np.nan),
                np.ones(N_PERIODS, bool),
                covariates=covs,
            )
        )
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--products", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=3, help="batched timing: best of R runs")
    parser.add_argument("--end-to-end", action="store_true", help="also time fit_many")
    args = parser.parse_args()

    design, response = make_arrays(args.products)
    print(f"{args.products} products x {N_PERIODS} periods, {design.shape[2] - 1} regressors")

    start = time.perf_counter()
    ref = baseline(design, response)
    base_s = time.perf_counter() - start

    batched_s = np.inf
    for _ in range(args.repeat):
        start = time.perf_counter()
        stack = fit_ols_stack(design, response, cov_type="classical", method="normal")
        batched_s = min(batched_s, time.perf_counter() - start)

    full_s = np.inf
    for _ in range(args.repeat):
        start = time.perf_counter()
        full = fit_ols_stack(design, response, cov_type="classical", method="normal")
        for name in (
            "vif",
            "condition_number",
            "durbin_watson",
            "breusch_pagan_p",
            "jarque_bera_p",
            "aic",
            "bic",
        ):
            getattr(full, name)
        full_s = min(full_s, time.perf_counter() - start)

    diff = max(
        float(np.max(np.abs(stack.params - ref["params"]) / ref["bse"])),
        float(np.max(np.abs(stack.bse - ref["bse"]) / ref["bse"])),
        float(np.max(np.abs(stack.pvalues - ref["pvalues"]) / ref["pvalues"])),
        float(np.max(np.abs(stack.r_squared - ref["rsquared"]) / ref["rsquared"])),
    )
    print(f"statsmodels loop : {base_s:8.3f} s  {args.products / base_s:10.0f} products/s")
    print(f"batched stack    : {batched_s:8.3f} s  {args.products / batched_s:10.0f} products/s")
    print(
        f"speed ratio      : {base_s / batched_s:8.1f}x  (same figures read: params, bse, "
        "pvalues, R-squared)"
    )
    print(
        f"batched + all diagnostics (VIF, condition number, DW, BP, JB, AIC, BIC): "
        f"{full_s:.3f} s  {args.products / full_s:.0f} products/s  ({base_s / full_s:.1f}x)"
    )
    print(f"max relative difference (coefficients vs their std. error): {diff:.2e}")
    print(f"rank-deficient products flagged: {stack.rank_deficient.size}")

    if args.end_to_end:
        hist = histories(design, response)
        spec = ModelSpec(
            form="log-log",
            covariates=("cross_a", "cross_b", "rival", "ads", "promo", "holiday", "weeks"),
            log_covariates=("cross_a", "cross_b", "rival", "ads"),
            standard_errors="classical",
        )
        start = time.perf_counter()
        fits = fit_many(hist, spec, holdout_periods=0)
        e2e_s = time.perf_counter() - start
        print(
            f"fit_many end to end (designs, fits, records): {e2e_s:8.3f} s  "
            f"{len(fits) / e2e_s:10.0f} products/s  ({base_s / e2e_s:.1f}x the loop)"
        )


if __name__ == "__main__":
    main()
