"""Decision quality: how close recommended prices come to the best price, by rule.

A simulation study in one run. For every product of every generator (see
``bench/decision_cases.py``: 20 seeds of the demo tea shop, and 10 seeds of a market-share
shop whose logistic demand none of the offered forms matches), the product is fitted as
the service would fit it, priced under its min/max prices and the observed-range guard,
and scored by its TRUE expected profit at the recommended price as a percentage of the
true best profit within the same allowed prices. A product the service would refuse (fit
failed, or a quality gate) counts at its current price.

Rules compared, all measured in the same run:

* ``keep current``: no change (the baseline);
* ``point``: the fitted coefficients taken as exact (the plug-in optimum);
* ``expected``: maximise mean profit over the estimate's distribution;
* ``cautious``: maximise the 10th percentile of profit;
* each of the three with the do-no-harm check (``+ check``);
* the same from fits whose own-price elasticity is shrunk toward the family and the
  catalogue (``shrunk``, :func:`models.shrink_own_price` over each seed's accepted fits);
* ``calibrated``: each product moves the share of its point move that the catalogue's
  spread of moves supports (:mod:`models.pricing.calibrate`, over each seed's catalogue;
  ``cautious`` with the check where fewer than three products can be priced);
* three other readings of the same catalogue, measured beside it and not offered by the
  service: the spread read from the point moves instead of the cautious ones
  (``calib. point moves``), and moves shrunk toward the catalogue's mean move instead of
  toward no move, with mean and spread read from the point moves (``calib. mean, point``)
  or the cautious ones (``calib. mean, cautious``).

Two ceilings, which no rule can be expected to reach:

* ``knows elasticity``: the true own-price elasticity at the current price given to the
  fitted curve, the other coefficients re-estimated given it (their conditional mean);
* ``knows prior``: the Bayes decision with the generator's true range of elasticities
  (uniform) as the prior and the fit's likelihood of the own-price coefficient, maximising
  posterior expected profit: it knows how elasticities are spread, not each product's.

Per generator it prints, for each rule, the median and 10th percentile of the score, the
share of products at 95% or better and the mean. Usage:

    nice .venv/bin/python bench/decisions.py [--quick] [--seeds N] [--market-seeds M]
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from scipy import optimize
from tqdm import tqdm

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from bench.decision_cases import Case, market_share_cases, tea_shop_cases  # noqa: E402
from models import PricingInputError, optimal_price  # noqa: E402
from models._typing import FloatArray  # noqa: E402
from models.errors import (  # noqa: E402
    InfeasibleConstraintsError,
    UnboundedObjectiveError,
    WrongSignError,
)
from models.pricing.calibrate import (  # noqa: E402
    MoveEvidence,
    calibrated_limit,
    catalogue_spread,
    move_evidence,
)
from models.pricing.constraints import NamedLimit, price_limits  # noqa: E402
from models.pricing.curve import scenario_values  # noqa: E402
from models.pricing.decide import PredictorLaw, predictor_law  # noqa: E402

RULES: tuple[tuple[str, str, bool, bool], ...] = (
    ("point", "point", False, False),
    ("expected", "expected", False, False),
    ("cautious", "cautious", False, False),
    ("point + check", "point", True, False),
    ("expected + check", "expected", True, False),
    ("cautious + check", "cautious", True, False),
    ("shrunk point", "point", False, True),
    ("shrunk expected", "expected", False, True),
    ("shrunk cautious", "cautious", False, True),
    ("shrunk exp. + check", "expected", True, True),
    ("shrunk caut. + check", "cautious", True, True),
)
CALIBRATED = "calibrated"
VARIANTS = ("calib. point moves", "calib. mean, point", "calib. mean, cautious")
CEILINGS = ("knows elasticity", "knows prior")
KEEP = "keep current"
PRIOR_POINTS = 201


def allowed_range(case: Case) -> tuple[float, float]:
    lower, upper = price_limits(
        case.constraints,
        unit_cost=case.unit_cost,
        current_price=case.current_price,
        price_range=case.price_range,
    )
    return max(b.value for b in lower), min(b.value for b in upper)


def argmax_on(score: Callable[[FloatArray], FloatArray], low: float, high: float) -> float:
    """The maximiser of a smooth function on ``[low, high]``: a fine grid, then Brent."""
    if not high > low:
        return low
    grid = np.linspace(low, high, 801)
    values = score(grid)
    i = int(np.argmax(values))
    a, b = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    found = optimize.minimize_scalar(
        lambda p: -float(score(np.array([p]))[0]),
        bounds=(a, b),
        method="bounded",
        options={"xatol": 1e-9 * high},
    )
    return float(found.x) if -float(found.fun) >= float(values[i]) else float(grid[i])


def coef_for(law: PredictorLaw, elasticity: float, p0: float) -> float:
    """The own-price coefficient that gives the fitted curve ``elasticity`` at ``p0``, the
    offset moving with it as its conditional mean given the coefficient."""
    if law.log_price:
        return elasticity
    if not law.linear:
        return elasticity / p0
    kappa = law.cov[0, 1] / law.cov[1, 1]
    o_hat, b_hat = law.mean
    return float(elasticity * (o_hat - b_hat * kappa) / (p0 - elasticity * kappa - elasticity * p0))


def curve_profit(
    law: PredictorLaw, coefs: FloatArray, cost: float
) -> Callable[[FloatArray], FloatArray]:
    """Mean profit per price over coefficients ``coefs`` (equal weights unless given by rows),
    with the offset at its conditional mean and conditional variance given each."""
    kappa = law.cov[0, 1] / law.cov[1, 1]
    offsets = law.mean[0] + kappa * (coefs - law.mean[1])
    rest = max(law.cov[0, 0] - law.cov[0, 1] * kappa, 0.0)

    def units(p: FloatArray) -> FloatArray:
        g = law.g(p)[None, :]
        eta: FloatArray = offsets[:, None] + coefs[:, None] * g
        result: FloatArray = np.maximum(eta, 0.0) if law.linear else np.exp(eta + 0.5 * rest)
        return result

    return lambda p: (p - cost)[None, :] * units(p)


def ceilings(case: Case, law: PredictorLaw, low: float, high: float) -> dict[str, float]:
    cost, p0 = case.unit_cost, case.current_price
    if not math.isfinite(law.cov[1, 1]) or law.cov[1, 1] <= 0.0:
        return {}
    known = np.array([coef_for(law, case.true_elasticity, p0)])
    profit_known = curve_profit(law, known, cost)
    prices: dict[str, float] = {
        "knows elasticity": argmax_on(lambda p: profit_known(p)[0], low, high)
    }
    grid = np.linspace(*case.prior, PRIOR_POINTS)
    coefs = np.array([coef_for(law, e, p0) for e in grid])
    sd = math.sqrt(law.cov[1, 1])
    # Uniform prior on the elasticity, likelihood of the coefficient, Jacobian db/de.
    log_w = -0.5 * ((coefs - law.mean[1]) / sd) ** 2 + np.log(np.abs(np.gradient(coefs, grid)))
    weights = np.exp(log_w - log_w.max())
    weights /= weights.sum()
    profit_prior = curve_profit(law, coefs, cost)
    prices["knows prior"] = argmax_on(lambda p: weights @ profit_prior(p), low, high)
    return prices


def evidence_of(case: Case) -> MoveEvidence | None:
    if case.fit is None:
        return None
    return move_evidence(
        case.fit,
        unit_cost=case.unit_cost,
        current_price=case.current_price,
        constraints=case.constraints,
    )


def calibrated_price(case: Case, evidence: MoveEvidence | None, tau2: float | None) -> float:
    """The calibrated rule's price: the point optimum within the calibrated reach, or the
    cautious choice with the check where the catalogue gives no spread."""
    if case.fit is None or evidence is None:
        return case.current_price
    constraints, rule, check = case.constraints, "cautious", True
    if tau2 is not None:
        limit = calibrated_limit(evidence, tau2, case.current_price)
        if limit is not None:
            constraints = replace(constraints, named_limits=(*constraints.named_limits, limit))
        rule, check = "point", False
    try:
        return optimal_price(
            case.fit,
            unit_cost=case.unit_cost,
            current_price=case.current_price,
            constraints=constraints,
            decide_by=rule,
            no_harm_check=check,
        ).recommended.price
    except (WrongSignError, PricingInputError):
        return case.current_price


@dataclass(frozen=True)
class Reading:
    """One reading of a catalogue's moves: the prior ``N(mean, tau2)`` of the true moves."""

    mean: float
    tau2: float


def catalogue_readings(evidence: list[MoveEvidence]) -> dict[str, Reading]:
    """The other readings of a catalogue (``VARIANTS``), by the method of moments as in
    :func:`models.pricing.calibrate.catalogue_spread`; empty below three products."""
    if len(evidence) < 3:
        return {}
    point = np.array([e.point_move for e in evidence])
    careful = np.array([e.cautious_move for e in evidence])
    noise = float(np.mean(np.array([e.spread for e in evidence]) ** 2))
    return {
        VARIANTS[0]: Reading(0.0, max(0.0, float(np.mean(point**2)) - noise)),
        VARIANTS[1]: Reading(float(point.mean()), max(0.0, float(point.var()) - noise)),
        VARIANTS[2]: Reading(float(careful.mean()), max(0.0, float(careful.var()) - noise)),
    }


def read_price(case: Case, evidence: MoveEvidence | None, reading: Reading | None) -> float:
    """The point optimum within the move the reading's normal posterior gives,
    ``mean + f (point move - mean)`` with ``f = tau2 / (tau2 + s^2)``, from the current price
    (the current price where that move and the point move point different ways)."""
    if case.fit is None or evidence is None or reading is None:
        return case.current_price
    total = reading.tau2 + evidence.spread**2
    share = reading.tau2 / total if total > 0.0 else 0.0
    target = reading.mean + share * (evidence.point_move - reading.mean)
    low, high = sorted((0.0, target))
    p0 = case.current_price
    limit = NamedLimit("reading", low=p0 * math.exp(low), high=p0 * math.exp(high))
    constraints = replace(case.constraints, named_limits=(*case.constraints.named_limits, limit))
    try:
        return optimal_price(
            case.fit, unit_cost=case.unit_cost, current_price=p0, constraints=constraints
        ).recommended.price
    except (WrongSignError, PricingInputError):
        return p0


def price_case(
    case: Case,
    evidence: MoveEvidence | None = None,
    tau2: float | None = None,
    readings: dict[str, Reading] | None = None,
) -> dict[str, float]:
    """Each rule's price for one case (the current price where it refuses)."""
    prices = {KEEP: case.current_price, CALIBRATED: calibrated_price(case, evidence, tau2)}
    for name in VARIANTS:
        prices[name] = read_price(case, evidence, (readings or {}).get(name))
    for name, rule, check, shrunk in RULES:
        prices[name] = case.current_price
        fit = case.shrunk if shrunk else case.fit
        if fit is None:
            continue
        try:
            found = optimal_price(
                fit,
                unit_cost=case.unit_cost,
                current_price=case.current_price,
                constraints=case.constraints,
                decide_by=rule,
                no_harm_check=check,
            )
        except (
            WrongSignError,
            InfeasibleConstraintsError,
            UnboundedObjectiveError,
            PricingInputError,
        ):
            continue
        prices[name] = found.recommended.price
    low, high = allowed_range(case)
    law = None if case.fit is None else predictor_law(case.fit, scenario_values(case.fit, None))
    found_ceilings = {} if law is None else ceilings(case, law, low, high)
    for name in CEILINGS:
        prices[name] = found_ceilings.get(name, case.current_price)
    return prices


def score_case(
    case: Case,
    evidence: MoveEvidence | None = None,
    tau2: float | None = None,
    readings: dict[str, Reading] | None = None,
) -> dict[str, float]:
    """True profit at each rule's price, as a percentage of the best allowed true profit."""
    low, high = allowed_range(case)
    best_price = argmax_on(case.true_profit, low, high)
    best = float(case.true_profit(np.array([best_price]))[0])
    prices = price_case(case, evidence, tau2, readings)
    return {
        name: 100.0 * float(case.true_profit(np.array([p]))[0]) / best for name, p in prices.items()
    }


def summary(scores: list[dict[str, float]]) -> list[tuple[str, float, float, float, float]]:
    rows = []
    for name in (KEEP, *[r[0] for r in RULES], CALIBRATED, *VARIANTS, *CEILINGS):
        values = np.array([s[name] for s in scores])
        rows.append(
            (
                name,
                float(np.median(values)),
                float(np.percentile(values, 10)),
                float(100.0 * np.mean(values >= 95.0)),
                float(values.mean()),
            )
        )
    return rows


def print_table(generator: str, scores: list[dict[str, float]], refused: int) -> None:
    print(f"\n{generator}: {len(scores)} products ({refused} refused, scored at current price)")
    head = f"{'price chosen by':<22}{'median %':>10}{'10th pct %':>12}"
    print(f"{head}{'>= 95% share':>14}{'mean %':>10}")
    for name, median, p10, share, mean in summary(scores):
        print(f"{name:<22}{median:>10.1f}{p10:>12.1f}{share:>13.0f}%{mean:>10.2f}")


def run(generators: dict[str, Callable[[], Iterator[list[Case]]]], total: int) -> None:
    start = time.perf_counter()
    results: dict[str, list[dict[str, float]]] = {name: [] for name in generators}
    refused: dict[str, int] = dict.fromkeys(generators, 0)
    with tqdm(total=total, desc="products", unit="product") as bar:
        for name, catalogues in generators.items():
            for cases in catalogues():  # one catalogue (seed) at a time: calibrated needs it
                evidence = [evidence_of(case) for case in cases]
                usable = [e for e in evidence if e is not None]
                tau2, readings = catalogue_spread(usable), catalogue_readings(usable)
                for case, found in zip(cases, evidence, strict=True):
                    results[name].append(score_case(case, found, tau2, readings))
                    refused[name] += case.refused is not None
                    bar.update()
    for name, scores in results.items():
        print_table(name, scores, refused[name])
    print(f"\n{time.perf_counter() - start:.0f} s")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=20, help="seeds of the demo tea shop")
    parser.add_argument(
        "--market-seeds", type=int, default=10, help="seeds of the market-share shop"
    )
    parser.add_argument("--quick", action="store_true", help="one seed of each, few products")
    args = parser.parse_args(argv)
    tea, market, per_market = args.seeds, args.market_seeds, 30
    if args.quick:
        tea, market, per_market = 1, 1, 6

    def tea_cases() -> Iterator[list[Case]]:
        for seed in range(1, tea + 1):
            yield list(tea_shop_cases(seed))

    def market_cases() -> Iterator[list[Case]]:
        for seed in range(1, market + 1):
            yield list(market_share_cases(seed, per_market))

    def near_best_cases() -> Iterator[list[Case]]:
        for seed in range(1, market + 1):
            yield list(market_share_cases(seed, per_market, near_best=True))

    generators = {
        "tea-shop": tea_cases,
        "market-share": market_cases,
        "market-share, near best": near_best_cases,
    }
    run(generators, tea * 40 + 2 * market * per_market)


if __name__ == "__main__":
    main()
