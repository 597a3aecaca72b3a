"""Does shrinkage help on the tea shop? Elasticity error, interval coverage and hold-out WAPE.

For each seed of the demo generator, every product without a trap is fitted twice:

* on its whole history, to compare the own-price elasticity at the means with the truth
  there (``TrueDemand.own_price_elasticity`` at the fitted means of price, covariates and
  cross prices), for the product's own estimate and for the shrunk one;
* on the history without its last 13 periods, to predict those periods (in stock only)
  from the own fit and from the shrunk fit (shrinkage among the shortened fits).

Shrinkage runs toward the family and the catalogue (``families``) and, for comparison,
toward the catalogue alone. Printed: root mean squared and mean absolute elasticity error,
the 95% interval's coverage of the truth, and the pooled hold-out WAPE, per spec.

Usage: python bench/borrow_strength.py [--seeds N] [--form log-log|auto]
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass, field

import numpy as np

from models import (
    COVARIATES,
    LOG_COVARIATES,
    DemandFit,
    ModelSpec,
    ScenarioProduct,
    elasticities,
    fit_many,
    fitted_units,
    generate_catalogue,
    shrink_own_price,
)

HOLDOUT = 13


@dataclass
class Tally:
    errors: list[float] = field(default_factory=list)
    covered: list[bool] = field(default_factory=list)
    abs_error: float = 0.0
    units: float = 0.0

    def line(self, label: str) -> str:
        e = np.array(self.errors)
        return (
            f"{label:<22} rmse {np.sqrt(np.mean(e**2)):.3f}  mae {np.mean(np.abs(e)):.3f}  "
            f"coverage {np.mean(self.covered):.3f}  hold-out WAPE {self.abs_error / self.units:.4f}"
        )


def true_elasticity(product: ScenarioProduct, fit: DemandFit) -> float:
    means = fit.variable_means
    covariates = {k: v for k, v in means.items() if k in COVARIATES}
    crosses = {k: v for k, v in means.items() if k not in COVARIATES and k != "price"}
    value = product.truth.own_price_elasticity(
        means["price"], covariates=covariates, cross_prices=crosses
    )
    return float(value)


def run(seeds: int, form: str) -> dict[str, Tally]:
    spec = ModelSpec(form=form, covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    tallies = {"own": Tally(), "shrunk (family)": Tally(), "shrunk (catalogue)": Tally()}
    for seed in range(1, seeds + 1):
        products = [p for p in generate_catalogue(seed).products if p.truth.trap is None]
        families = {p.sku: p.family for p in products}
        whole = fit_many([p.history for p in products], spec)
        short_histories = [p.history.head(-HOLDOUT) for p in products]
        short = fit_many(short_histories, spec)
        keep = [
            i
            for i in range(len(products))
            if isinstance(whole[i], DemandFit) and isinstance(short[i], DemandFit)
        ]
        fits = [whole[i] for i in keep]
        short_fits = [short[i] for i in keep]
        kept = [products[i] for i in keep]
        variants = {
            "own": (fits, short_fits),
            "shrunk (family)": (
                list(shrink_own_price(fits, families=families).fits),
                list(shrink_own_price(short_fits, families=families).fits),
            ),
            "shrunk (catalogue)": (
                list(shrink_own_price(fits).fits),
                list(shrink_own_price(short_fits).fits),
            ),
        }
        for name, (full_fits, holdout_fits) in variants.items():
            tally = tallies[name]
            for product, fit, early in zip(kept, full_fits, holdout_fits, strict=True):
                assert isinstance(fit, DemandFit) and isinstance(early, DemandFit)
                truth = true_elasticity(product, fit)
                own = elasticities(fit, at="mean").own
                tally.errors.append(own.value - truth)
                tally.covered.append(own.ci_low <= truth <= own.ci_high)
                expected = fitted_units(early, product.history)[-HOLDOUT:]
                units = product.history.units[-HOLDOUT:]
                ok = product.history.in_stock[-HOLDOUT:] & np.isfinite(expected)
                tally.abs_error += float(np.sum(np.abs(units[ok] - expected[ok])))
                tally.units += float(np.sum(units[ok]))
    return tallies


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=20)
    parser.add_argument("--form", default="log-log")
    args = parser.parse_args()
    tallies = run(args.seeds, args.form)
    print(f"form {args.form}, seeds 1-{args.seeds}, products {len(tallies['own'].errors)}")
    for name, tally in tallies.items():
        print(tally.line(name))


if __name__ == "__main__":
    main()
