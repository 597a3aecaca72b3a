"""Price optimisation timings against a plain prediction measured in the same run.

Baseline: ``models.predict`` at one price (the cheapest numerical call a pricing
endpoint makes). Timed against it, per call and in CPU time:

* ``optimal_price`` on one fit, continuous (no draws);
* the same with price endings (exact grid search) and with a stock cap;
* the same with 200 coefficient draws;
* ``optimal_family_prices`` for a family of 10 products with cross-price terms, without
  draws, with price endings, and with 200 draws.

Fits come from the seeded tea-shop generator (50 products, the ``herbal`` family), fitted
once before timing. Usage: python bench/optimise_core.py [--repeat R] [--draws N]
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable

from models import (  # noqa: E402
    DemandFit,
    ModelSpec,
    PriceConstraints,
    fit_demand,
    generate_catalogue,
    optimal_family_prices,
    optimal_price,
    predict,
)
from models.scenario import COVARIATES, LOG_COVARIATES  # noqa: E402


def cpu_per_call(call: Callable[[], object], repeat: int) -> float:
    """Best-of-three CPU seconds per call over ``repeat`` calls."""
    call()  # warm caches and imports
    best = float("inf")
    for _ in range(3):
        start = time.process_time()
        for _ in range(repeat):
            call()
        best = min(best, (time.process_time() - start) / repeat)
    return best


def family_fits(seed: int = 7) -> tuple[dict[str, DemandFit], dict[str, float], dict[str, float]]:
    catalogue = generate_catalogue(seed, n_products=50)
    fits, costs, current = {}, {}, {}
    for product in catalogue.in_family("herbal"):
        spec = ModelSpec(
            form=product.truth.form,
            covariates=COVARIATES,
            log_covariates=LOG_COVARIATES,
            cross_prices=tuple(product.truth.cross_price_coefs),
        )
        fits[product.sku] = fit_demand(product.history, spec)
        costs[product.sku] = product.unit_cost
        current[product.sku] = product.current_price
    return fits, costs, current


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=300, help="calls per single-product timing")
    parser.add_argument("--draws", type=int, default=200)
    args = parser.parse_args()

    fits, costs, current = family_fits()
    sku = sorted(fits)[0]
    fit, cost, price = fits[sku], costs[sku], current[sku]
    print(f"family of {len(fits)} ({', '.join(sorted(fits))}); single product {sku} ({fit.form})")

    base = cpu_per_call(lambda: predict(fit, price=price, unit_cost=cost), args.repeat)
    rows: list[tuple[str, float]] = [("predict (baseline)", base)]
    endings = PriceConstraints(price_endings=(0.49, 0.99), max_change_pct=15.0)
    stock = PriceConstraints(max_units=0.9 * predict(fit, price=price).expected_units)
    single: dict[str, Callable[[], object]] = {
        "optimal_price, continuous": lambda: optimal_price(
            fit, unit_cost=cost, current_price=price
        ),
        "optimal_price, endings + max change": lambda: optimal_price(
            fit, unit_cost=cost, current_price=price, constraints=endings
        ),
        "optimal_price, stock cap": lambda: optimal_price(
            fit, unit_cost=cost, current_price=price, constraints=stock
        ),
        f"optimal_price, {args.draws} draws": lambda: optimal_price(
            fit, unit_cost=cost, current_price=price, uncertainty_draws=args.draws
        ),
    }
    for name, call in single.items():
        rows.append((name, cpu_per_call(call, args.repeat if "draws" not in name else 20)))
    rules = {s: PriceConstraints(price_endings=(0.49, 0.99)) for s in fits}
    family: dict[str, Callable[[], object]] = {
        "family of 10, continuous": lambda: optimal_family_prices(
            fits, unit_costs=costs, current_prices=current
        ),
        "family of 10, endings": lambda: optimal_family_prices(
            fits, unit_costs=costs, current_prices=current, constraints=rules
        ),
        "family of 10, ladder + index cap": lambda: optimal_family_prices(
            fits,
            unit_costs=costs,
            current_prices=current,
            order=[(a, b) for a, b in zip(sorted(fits), sorted(fits)[1:3], strict=False)],
            max_total_change_pct=2.0,
        ),
        f"family of 10, {args.draws} draws": lambda: optimal_family_prices(
            fits, unit_costs=costs, current_prices=current, uncertainty_draws=args.draws
        ),
    }
    for name, call in family.items():
        rows.append((name, cpu_per_call(call, 5 if "draws" not in name else 1)))
    print(f"{'call':40s} {'CPU per call':>14s} {'x baseline':>11s}")
    for name, seconds in rows:
        shown = f"{seconds * 1e3:10.3f} ms" if seconds < 1.0 else f"{seconds:10.3f} s "
        print(f"{name:40s} {shown:>14s} {seconds / base:11.1f}")


if __name__ == "__main__":
    main()
