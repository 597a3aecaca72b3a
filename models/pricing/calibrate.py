"""Moves calibrated by the catalogue: how far a price moves toward its fitted optimum.

A fitted optimum proposes a move from the current price, ``d = ln(optimum / current)``. Part
of that move is real (the current price is off its best) and part is the estimate's noise;
across a catalogue the two can be told apart, as in a random-effects model (the method of
moments of DerSimonian and Laird, *Meta-analysis in clinical trials*, Controlled Clinical
Trials 7, 1986): with ``s_i`` the spread of each product's optimal log price over its
estimate's distribution, the spread of the true moves is

    tau^2 = max(0, mean(c_i^2) - mean(s_i^2)),

and each product moves the share ``f_i = tau^2 / (tau^2 + s_i^2)`` of its point move, the
normal posterior mean of its true move under a ``N(0, tau^2)`` prior (shrinkage of a normal
mean toward zero). A shop whose current prices sit near their best has ``tau^2`` near zero
and moves little; one whose prices are far off moves nearly all the way.

The catalogue's ``tau^2`` is read from the *cautious* moves ``c_i`` (the 10th-percentile
choice of :mod:`models.pricing.decide`), not from the point moves: where the true curve has a
shape no offered form matches, the point optima are confidently wrong away from the data and
their moves overstate how far prices are off, while the cautious choice stays near the data.
The calibrated move itself follows the point optimum, scaled by ``f_i``. Checked by the
decision study (``bench/decisions.py``); see docs/estimation.md.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from functools import partial
from typing import Final

import numpy as np

from models._typing import FloatArray
from models.errors import PricingInputError, WrongSignError
from models.pricing.constraints import NamedLimit, PriceConstraints
from models.pricing.curve import scenario_values
from models.pricing.decide import PredictorLaw, predictor_law
from models.pricing.single import optimal_price
from models.result import DemandFit

CALIBRATION: Final = "catalogue_calibration"
"""The name of the limit a calibrated move puts on a price (in ``binding_constraints``)."""
MIN_PRODUCTS: Final = 3
"""Fewer priced products than this give no catalogue spread (the decision falls back)."""
WHOLE_MOVE: Final = 1e-4
"""A calibrated reach this close (in log price) to the point move is the whole move."""
SPREAD_DRAWS: Final = 400


@dataclass(frozen=True)
class MoveEvidence:
    """What one product says about moving its price.

    Attributes
    ----------
    sku : str
    point_move, cautious_move : float
        ``ln(price / current price)`` of the point and the cautious choices.
    spread : float
        Spread of the optimal log price over the estimate's distribution (half the
        distance between its 16th and 84th percentiles: one standard deviation of a normal).
    """

    sku: str
    point_move: float
    cautious_move: float
    spread: float


def best_prices(
    law: PredictorLaw, draws: FloatArray, unit_cost: float, low: float, high: float
) -> FloatArray:
    """Each draw's profit-maximising price within ``[low, high]``, in closed form.

    Every curve of a law is single-peaked in profit, so the best price in the range is the
    peak clipped to it: ``c b / (1 + b)`` for units ``exp(o) p^b`` (the markup rule; no peak
    while ``b >= -1``), ``c - 1 / b`` for ``exp(o + b p)``, and ``c / 2 - o / (2 b)`` for the
    line ``o + b p``; a draw whose profit keeps rising (no peak) takes ``high``.
    """
    o, b = draws[:, 0], draws[:, 1]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if law.linear:
            peak = np.where(b < 0.0, unit_cost / 2.0 - o / (2.0 * b), high)
        elif law.log_price:
            peak = np.where(b < -1.0, unit_cost * b / (1.0 + b), high)
        else:
            peak = np.where(b < 0.0, unit_cost - 1.0 / b, high)
    peak = np.where(np.isfinite(peak), peak, high)
    clipped: FloatArray = np.clip(peak, low, high)
    return clipped


def optimum_spread(
    fit: DemandFit,
    *,
    unit_cost: float,
    low: float,
    high: float,
    scenario: dict[str, float] | None = None,
    seed: int = 0,
) -> float | None:
    """The spread of the profit-maximising log price within ``[low, high]`` over draws of
    the offset and own-price coefficient (:class:`~models.pricing.decide.PredictorLaw`, each
    draw's best price by :func:`best_prices`); None when the covariance is unusable or the
    range is empty."""
    law = predictor_law(fit, scenario_values(fit, scenario))
    if law is None or not (0.0 < low < high < math.inf):
        return None
    try:
        root = np.linalg.cholesky(law.cov)
    except np.linalg.LinAlgError:
        return None
    draws = np.random.default_rng(seed).standard_normal((SPREAD_DRAWS, 2)) @ root.T + law.mean
    best = np.log(best_prices(law, draws, unit_cost, low, high))
    low_q, high_q = np.quantile(best, [0.16, 0.84])
    return float(high_q - low_q) / 2.0


def move_evidence(
    fit: DemandFit,
    *,
    unit_cost: float,
    current_price: float,
    constraints: PriceConstraints | None = None,
    scenario: dict[str, float] | None = None,
    cautious: bool = True,
) -> MoveEvidence | None:
    """One product's point and cautious moves and its optimum's spread (profit, no
    do-no-harm check; ``cautious=False`` leaves the cautious move out as nan, for pricing the
    product itself, which needs only the point move); None where it cannot be priced (a
    wrong sign, no feasible price, no finite optimum, no upper limit) or its covariance is
    unusable.

    Examples
    --------
    >>> import models
    >>> product = models.generate_catalogue(7).product("TEA-030")
    >>> spec = models.ModelSpec(covariates=models.COVARIATES, log_covariates=models.LOG_COVARIATES)
    >>> fit = models.fit_demand(product.history, spec)
    >>> bounds = models.PriceConstraints(min_price=product.min_price, max_price=product.max_price)
    >>> cost, price = product.unit_cost, product.current_price
    >>> found = move_evidence(fit, unit_cost=cost, current_price=price, constraints=bounds)
    >>> found.sku, round(found.point_move, 3), round(found.cautious_move, 3), found.spread > 0.0
    ('TEA-030', 0.063, -0.033, True)
    """
    price_by = partial(
        optimal_price,
        fit,
        unit_cost=unit_cost,
        current_price=current_price,
        constraints=constraints,
        scenario=scenario,
        decision_figures=False,  # only the prices are read
    )
    try:
        point = price_by(decide_by="point")
        careful = price_by(decide_by="cautious").recommended.price if cautious else math.nan
    except (PricingInputError, WrongSignError):
        return None
    low, high = point.feasible_range
    spread = (
        None
        if high is None
        else optimum_spread(fit, unit_cost=unit_cost, low=low, high=high, scenario=scenario)
    )
    if spread is None:
        return None
    return MoveEvidence(
        sku=fit.sku,
        point_move=math.log(point.recommended.price / current_price),
        cautious_move=math.log(careful / current_price),
        spread=spread,
    )


def catalogue_spread(evidence: Sequence[MoveEvidence]) -> float | None:
    """``tau^2``: the spread of the true moves across the catalogue (method of moments on
    the cautious moves); None with fewer than :data:`MIN_PRODUCTS` products.

    Examples
    --------
    >>> moves = [MoveEvidence(f"P{i}", 0.0, c, 0.05) for i, c in enumerate((0.1, -0.2, 0.3))]
    >>> round(catalogue_spread(moves), 6)  # (0.01 + 0.04 + 0.09) / 3 - 0.05 ** 2
    0.044167
    """
    usable = [e for e in evidence if math.isfinite(e.cautious_move) and math.isfinite(e.spread)]
    if len(usable) < MIN_PRODUCTS:
        return None
    moves = np.array([e.cautious_move for e in usable])
    spreads = np.array([e.spread for e in usable])
    return max(0.0, float(np.mean(moves**2) - np.mean(spreads**2)))


def calibrated_share(evidence: MoveEvidence, tau2: float) -> float:
    """``f = tau^2 / (tau^2 + s^2)``: the share of its point move a product makes.

    Examples
    --------
    >>> calibrated_share(MoveEvidence("P1", 0.2, 0.1, spread=0.1), tau2=0.03)
    0.75
    """
    total = tau2 + evidence.spread**2
    return tau2 / total if total > 0.0 else 0.0


def calibrated_limit(
    evidence: MoveEvidence, tau2: float, current_price: float
) -> NamedLimit | None:
    """The floor and ceiling that let the price move the calibrated share of its point move
    (the move itself, both ways, so a price between stays possible); None when the share
    covers the whole move (within :data:`WHOLE_MOVE` in log terms): the point optimum stands
    and no limit of its own should be named beside the constraints that hold it.

    Examples
    --------
    >>> limit = calibrated_limit(MoveEvidence("P1", 0.2, 0.1, spread=0.1), 0.03, 10.0)
    >>> limit.name, round(limit.low, 4), round(limit.high, 4)  # 10 * exp(-+0.75 * 0.2)
    ('catalogue_calibration', 8.6071, 11.6183)
    """
    reach = abs(calibrated_share(evidence, tau2) * evidence.point_move)
    if abs(evidence.point_move) - reach <= WHOLE_MOVE:
        return None
    return NamedLimit(
        CALIBRATION,
        low=current_price * math.exp(-reach),
        high=current_price * math.exp(reach),
        decision_only=True,
    )
