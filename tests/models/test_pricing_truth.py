"""Recover the truth: recommended prices on the seeded tea-shop generator, judged under the
true demand curve.

For each seed a product is simulated (the four forms in turn, true elasticity at the
base point drawn from -2.6 to -1.7 so that the true optimum lies near the observed
prices), its demand fitted, and the profit-maximising price recommended under the
default guard. The score is the true expected profit at the recommendation over the
true expected profit at the true optimum within the same allowed prices.

Run ``python -m tests.models.test_pricing_truth`` to print the distribution for reports.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from typing import Any

import numpy as np

from models import DemandFit, ModelSpec, fit_many, optimal_price, simulate_product
from models.scenario import COVARIATES, LOG_COVARIATES

N_SEEDS = 100
FORMS = ("log-log", "semi-log", "linear", "poisson")
SPEC = ModelSpec(covariates=COVARIATES, log_covariates=LOG_COVARIATES)


@dataclass(frozen=True)
class Outcome:
    form: str
    ratio: float  # true profit at the recommendation / at the true constrained optimum
    ratio_unconstrained: float  # ... / at the true optimum over all prices
    recommended: float
    true_optimum: float
    interior: bool  # the true optimum lies inside the allowed prices
    covered: bool | None  # the 90% price interval covers the true constrained optimum


@cache
def outcomes(n_seeds: int = N_SEEDS, draws: int = 200) -> list[Outcome]:
    results = []
    for form in FORMS:
        seeds = [s for s in range(n_seeds) if s % len(FORMS) == FORMS.index(form)]
        products = [
            simulate_product(
                s,
                form=form,
                elasticity=float(np.random.default_rng([s, 1]).uniform(-2.6, -1.7)),
                sku=f"TRUTH-{s}",
            )
            for s in seeds
        ]
        spec = ModelSpec(**{**SPEC.to_dict(), "form": form})
        fits = fit_many([p.history for p in products], spec)
        for product, fit in zip(products, fits, strict=True):
            assert isinstance(fit, DemandFit)
            results.append(_score(product, fit, draws))
    return results


def _score(product: Any, fit: DemandFit, draws: int) -> Outcome:
    history = product.history
    latest = {name: values[-1] for name, values in history.covariates.items()}
    cost = product.unit_cost

    def true_profit(p: np.ndarray) -> np.ndarray:
        units = product.truth.expected_units(p, covariates=latest)
        return (p - cost) * np.asarray(units)

    result = optimal_price(
        fit, unit_cost=cost, current_price=product.current_price, uncertainty_draws=draws
    )
    low, high = fit.price_range
    allowed = np.linspace(0.9 * low, 1.1 * high, 200_001)
    wide = np.linspace(0.2 * low, 5.0 * high, 400_001)
    best = float(true_profit(allowed).max())
    best_price = float(allowed[np.argmax(true_profit(allowed))])
    best_anywhere = float(true_profit(wide).max())
    achieved = float(true_profit(np.array(result.recommended.price)))
    covered = None
    if result.uncertainty is not None and result.uncertainty.price_interval is not None:
        lo, hi = result.uncertainty.price_interval
        covered = lo - 1e-9 <= best_price <= hi + 1e-9
    return Outcome(
        form=fit.form,
        ratio=achieved / best,
        ratio_unconstrained=achieved / best_anywhere,
        recommended=result.recommended.price,
        true_optimum=best_price,
        interior=0.9 * low * 1.001 < best_price < 1.1 * high * 0.999,
        covered=covered,
    )


def test_recommended_price_earns_nearly_the_true_optimum() -> None:
    scored = outcomes()
    ratios = np.array([o.ratio for o in scored])
    assert np.median(ratios) >= 0.95, np.quantile(ratios, [0.05, 0.25, 0.5])
    assert np.all(ratios <= 1.0 + 1e-9)  # nothing beats the true optimum
    # Most true optima lie inside the allowed prices, so the test is not about bounds.
    assert np.mean([o.interior for o in scored]) > 0.6


def figures(n_seeds: int = N_SEEDS, draws: int = 200) -> dict[str, Any]:
    """The distribution of the profit ratio, overall and per form, for reports."""
    scored = outcomes(n_seeds, draws)

    def summary(items: list[Outcome]) -> dict[str, Any]:
        ratios = np.array([o.ratio for o in items])
        covered = [o.covered for o in items if o.covered is not None]
        return {
            "n": len(items),
            "median": round(float(np.median(ratios)), 4),
            "p05_p25_p75": [round(float(q), 4) for q in np.quantile(ratios, [0.05, 0.25, 0.75])],
            "min": round(float(ratios.min()), 4),
            "median_vs_unconstrained": round(
                float(np.median([o.ratio_unconstrained for o in items])), 4
            ),
            "true_optimum_inside": round(float(np.mean([o.interior for o in items])), 2),
            "price_interval_covers_truth": (round(float(np.mean(covered)), 2) if covered else None),
        }

    out = {"all": summary(scored)}
    for form in FORMS:
        out[form] = summary([o for o in scored if o.form == form])
    return out


def test_price_interval_covers_the_true_optimum_about_as_often_as_it_says() -> None:
    # A 90% interval; 100 seeds give a binomial standard deviation of 3 points.
    covered = [o.covered for o in outcomes() if o.covered is not None]
    assert len(covered) == N_SEEDS
    assert 0.75 <= np.mean(covered) <= 0.99, np.mean(covered)


if __name__ == "__main__":
    for key, value in figures().items():
        print(key, value)
