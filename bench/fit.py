"""Batched least squares against a per-product statsmodels loop, measured in the same run.

Fits N products x 104 weekly periods of a log-log demand equation with 8 regressors
(own price, two cross prices, rival price, ad spend in logs; promotion, holiday and a
trend in levels) twice over the same pre-split arrays:

* baseline: ``sm.OLS(y, X).fit()`` per product, reading params, bse, pvalues, rsquared;
* batched: ``models.fit_ols_stack`` on the whole stack (all statistics of a fit record:
  coefficients, covariance, p-values, R-squared, F, AIC/BIC, VIF, condition number,
  Durbin-Watson, Breusch-Pagan, Jarque-Bera).

Prints products per second, the speed ratio and the largest relative difference
(coefficients relative to their standard error).

``--end-to-end`` also times what the nightly refit does with the same data held as
History objects: ``models.fit_many`` in batches (designs, exclusions, fits, hold-out WAPE,
diagnostics, warnings, equations: complete fit records) and ``DemandFit.to_dict`` on every
record, next to two baselines measured in the same run: ``models.fit_demand`` product by
product (on a sample), and the field-by-field serialisation ``to_dict`` used to do
(``clean`` on every value). ``--freeze-heap`` first moves the objects already alive to
the collector's permanent generation (``gc.freeze()``), as a long-running worker can do
after start-up, so that full collections no longer walk them.

Usage: python bench/fit.py [--products N] [--repeat R] [--end-to-end [--batch B]
       [--standard-errors hc3|classical|hac] [--single-sample S] [--freeze-heap]]
"""

from __future__ import annotations

import argparse
import gc
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import fields
from typing import Any

import numpy as np
import statsmodels.api as sm

from models import DemandFit, History, ModelSpec, fit_demand, fit_many  # noqa: E402
from models.ols import fit_ols_stack  # noqa: E402
from models.result import clean  # noqa: E402

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


def field_by_field(fit: DemandFit) -> dict[str, Any]:
    """The serialisation ``DemandFit.to_dict`` used to do: every value through ``clean``."""
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


def best_of(repeat: int, run: Any) -> float:
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        run()
        best = min(best, time.perf_counter() - start)
    return float(best)


@contextmanager
def collector_paused(pause: bool) -> Iterator[None]:
    """Pause the cyclic garbage collector (fit records hold no reference cycles)."""
    if pause:
        gc.disable()
    try:
        yield
    finally:
        if pause:
            gc.enable()


def nightly_like(
    batches: list[list[History]], spec: ModelSpec, repeat: int, *, pause: bool
) -> tuple[float, float]:
    """Seconds in fit_many and in to_dict, batch by batch as the refit job does (best of R)."""
    best_fit = best_dict = np.inf
    for _ in range(repeat):
        fit_s = dict_s = 0.0
        for batch in batches:
            # The job keeps a batch's records until they are written, then drops them.
            with collector_paused(pause):
                start = time.perf_counter()
                fits = fit_many(batch, spec)
                middle = time.perf_counter()
                payloads = [f.to_dict() for f in fits if isinstance(f, DemandFit)]
                fit_s += middle - start
                dict_s += time.perf_counter() - middle
                del fits, payloads
        best_fit, best_dict = min(best_fit, fit_s), min(best_dict, dict_s)
    return float(best_fit), float(best_dict)


def end_to_end(
    design: np.ndarray, response: np.ndarray, args: argparse.Namespace, rates: dict[str, float]
) -> None:
    """Time fit_many and to_dict on History objects, with same-run baselines."""
    hist = histories(design, response)
    spec = ModelSpec(
        form="log-log",
        covariates=("cross_a", "cross_b", "rival", "ads", "promo", "holiday", "weeks"),
        log_covariates=("cross_a", "cross_b", "rival", "ads"),
        standard_errors=args.standard_errors,
    )
    n = len(hist)
    batches = [hist[i : i + args.batch] for i in range(0, n, args.batch)]
    fit_many(batches[0], spec)  # warm up
    if args.freeze_heap:
        gc.collect()
        gc.freeze()
    as_is = nightly_like(batches, spec, args.repeat, pause=False)
    paused = nightly_like(batches, spec, args.repeat, pause=True)
    records = [f for f in fit_many(batches[0], spec) if isinstance(f, DemandFit)]
    with collector_paused(True):
        repeat = max(args.repeat, 5)  # one batch only: more runs for a steady best
        dict_s = best_of(repeat, lambda: [f.to_dict() for f in records])
        generic_s = best_of(repeat, lambda: [field_by_field(f) for f in records])
    sample = hist[: args.single_sample]
    singles: list[DemandFit] = []
    single_s = best_of(1, lambda: singles.extend(fit_demand(h, spec) for h in sample))
    single_rate = len(sample) / single_s
    worst = max(
        float(np.max(np.abs(f.params - s.params) / np.array([c.std_error for c in s.coefficients])))
        for f, s in zip(records, singles, strict=False)
    )
    if args.freeze_heap:
        gc.unfreeze()

    print(
        f"\nend to end, {n} products in batches of {args.batch}, {args.standard_errors} standard "
        f"errors{', start-up heap frozen' if args.freeze_heap else ''} (products/s):"
    )
    print("                                     collector as is   paused per batch")
    for label, (a, b) in (
        ("fit_many (complete fit records)", (n / as_is[0], n / paused[0])),
        ("to_dict of every record", (n / as_is[1], n / paused[1])),
        ("fit_many + to_dict", (n / sum(as_is), n / sum(paused))),
    ):
        print(f"  {label:33s} {a:12.0f} {b:18.0f}")
    print(f"  array core with all diagnostics   {rates['core']:12.0f}")
    print(f"  statsmodels loop                  {rates['loop']:12.0f}")
    print(f"  fit_demand, one by one            {single_rate:12.0f}   (timed on {len(sample)})")
    print(
        f"  to_dict {len(records) / dict_s:.0f}/s against the field-by-field serialisation "
        f"{len(records) / generic_s:.0f}/s, both with the collector paused: "
        f"{generic_s / dict_s:.1f}x"
    )
    print(
        f"  fit_many + to_dict as is: {n / sum(as_is) / rates['loop']:.1f}x the statsmodels "
        f"loop, {n / sum(as_is) / rates['core']:.2f}x the array core; fit_many "
        f"{n / as_is[0] / single_rate:.0f}x fit_demand one by one"
    )
    print(f"  fit_many vs fit_demand, max |difference| / std. error: {worst:.1e}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--products", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=3, help="batched timing: best of R runs")
    parser.add_argument("--end-to-end", action="store_true", help="also time fit_many, to_dict")
    parser.add_argument("--batch", type=int, default=500, help="products per fit_many call")
    parser.add_argument("--standard-errors", default="hc3", choices=("hc3", "classical", "hac"))
    parser.add_argument("--single-sample", type=int, default=300, help="fit_demand baseline size")
    parser.add_argument("--freeze-heap", action="store_true", help="gc.freeze() before timing")
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
        rates = {"core": args.products / full_s, "loop": args.products / base_s}
        end_to_end(design, response, args, rates)


if __name__ == "__main__":
    main()
