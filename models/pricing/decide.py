"""Choosing one product's price over the estimate's distribution, not only its point.

Once the other variables are fixed, a product's demand curve depends on the coefficients
only through two numbers: the offset ``o`` (everything but the own-price term) and the
own-price coefficient ``b``, so that ``eta(p) = o + b * g(p)`` with ``g = ln`` or the
identity (see :mod:`models.pricing.curve`). Both are linear in the coefficients, so under
the fit's normal approximation ``N(params, cov)`` the predictor at any one price is normal
with mean ``mu(p)`` and variance ``v(p) = Var(o) + 2 g Cov(o, b) + g**2 Var(b)``. Expected
units are increasing in ``eta`` (``exp(eta)``, or ``max(eta, 0)`` for linear demand), which
gives the two decision criteria in closed form, with no random draws:

* ``expected``: the mean of ``(p - cost) * units`` over the distribution. For the log forms
  the mean of a lognormal, ``exp(mu + v / 2)`` (Aitchison and Brown, *The Lognormal
  Distribution*, 1957, eq. 2.8); for linear demand the mean of a normal floored at zero,
  ``mu * Phi(mu / s) + s * phi(mu / s)`` with ``s = sqrt(v)`` (the first partial moment
  of the normal).
* ``cautious``: the 10th percentile of profit, the figure the profit exceeds in nine of
  ten outcomes. A monotone function of a normal has the function of the normal's quantile
  as its quantile, so it is ``(p - cost) * units(mu + z * s)`` with ``z`` the normal's
  10% point (90% point where ``p < cost`` and the margin is negative).
* ``point``: the fitted coefficients taken as exact (the classic plug-in optimum).

The value of knowing is the expected objective lost because the coefficients are not known
exactly: the mean over the distribution of ``max_p f(p | o, b) - f(chosen | o, b)`` within
the same allowed prices, computed by Gauss-Hermite quadrature over ``(o, b)`` (a tensor grid
of ``QUADRATURE_NODES`` squared nodes).

The do-no-harm check keeps the current price unless the chosen price beats it in at least
``GAIN_CHANCE`` of the distribution's weight and the expected gain is positive; the
comparison uses the same quadrature.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Final

import numpy as np
from scipy import optimize, special, stats

from models._typing import FloatArray
from models.errors import PricingInputError, UnboundedObjectiveError
from models.pricing import notes
from models.pricing.constraints import Interval
from models.pricing.curve import DemandCurve, design_row, log_offset, own_index
from models.pricing.result import PriceDecision
from models.pricing.solve1d import SEARCH_SPAN, maximise_batch
from models.result import DemandFit, FitWarning

DECISIONS: Final = ("point", "expected", "cautious")
CAUTIOUS_LEVEL: Final = 0.10
"""The cautious choice maximises the profit exceeded in nine of ten outcomes (10th percentile)."""
GAIN_CHANCE: Final = 0.80
"""The do-no-harm check moves only when the new price wins in at least 80% of outcomes."""
NO_HARM_CHECK: Final = "no_harm_check"
"""The name the check takes among binding constraints when it keeps the current price."""
QUADRATURE_NODES: Final = 24
NEGLIGIBLE_WEIGHT: Final = 1e-12
"""Quadrature nodes lighter than this (far in the tails) are left out of money figures."""
DECISION_GRID: Final = 241


@dataclass(frozen=True)
class PredictorLaw:
    """The normal law of ``(offset, own-price coefficient)`` at a scenario."""

    mean: FloatArray  # (2,)
    cov: FloatArray  # (2, 2)
    log_price: bool
    linear: bool

    def g(self, price: FloatArray) -> FloatArray:
        result: FloatArray = np.log(price) if self.log_price else price
        return result

    def moments(self, price: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Mean and standard deviation of ``eta`` at each price."""
        g = self.g(price)
        mu = self.mean[0] + self.mean[1] * g
        var = self.cov[0, 0] + 2.0 * self.cov[0, 1] * g + self.cov[1, 1] * g * g
        return mu, np.sqrt(np.clip(var, 0.0, None))

    def units(self, eta: FloatArray) -> FloatArray:
        if self.linear:
            return np.maximum(eta, 0.0)
        with np.errstate(over="ignore"):
            result: FloatArray = np.exp(eta)
        return result

    def expected(self, price: FloatArray, cost: float) -> FloatArray:
        """Mean of ``(price - cost) * units`` over the law."""
        mu, s = self.moments(price)
        if self.linear:
            with np.errstate(divide="ignore", invalid="ignore"):
                z = np.where(s > 0.0, mu / np.where(s > 0.0, s, 1.0), np.sign(mu) * np.inf)
            mean_units = np.where(
                s > 0.0,
                mu * special.ndtr(z) + s * np.exp(-0.5 * z * z) / math.sqrt(2 * math.pi),
                np.maximum(mu, 0.0),
            )
        else:
            with np.errstate(over="ignore"):
                mean_units = np.exp(mu + 0.5 * s * s)
        result: FloatArray = (price - cost) * mean_units
        return result

    def quantile(self, price: FloatArray, cost: float, level: float) -> FloatArray:
        """The ``level`` quantile of ``(price - cost) * units`` over the law."""
        mu, s = self.moments(price)
        z = float(stats.norm.ppf(level))
        margin = price - cost
        eta = np.where(margin >= 0.0, mu + z * s, mu - z * s)
        result: FloatArray = margin * self.units(eta)
        return result

    def nodes(self, n: int = QUADRATURE_NODES) -> tuple[FloatArray, FloatArray]:
        """Gauss-Hermite product nodes ``(n*n, 2)`` of ``(offset, coef)`` and their weights."""
        x, w = np.polynomial.hermite_e.hermegauss(n)  # weight exp(-x**2 / 2)
        w = w / w.sum()
        values, vectors = np.linalg.eigh(0.5 * (self.cov + self.cov.T))
        root = vectors * np.sqrt(np.clip(values, 0.0, None))
        grid = np.stack(np.meshgrid(x, x, indexing="ij"), axis=-1).reshape(-1, 2)
        weights: FloatArray = np.outer(w, w).reshape(-1)
        points: FloatArray = self.mean + grid @ root.T
        return points, weights


def predictor_law(fit: DemandFit, values: dict[str, float]) -> PredictorLaw | None:
    """The law of ``(offset, coef)`` at the scenario; None when the covariance is unusable."""
    cov = fit.cov
    if not np.all(np.isfinite(cov)) or not np.all(np.isfinite(fit.params)):
        return None
    j = own_index(fit)
    row = design_row(fit, values)
    loads = np.zeros((2, len(row)))
    loads[0] = row
    loads[1, j] = 1.0
    mean = loads @ fit.params + np.array([log_offset(fit), 0.0])
    return PredictorLaw(
        mean=mean,
        cov=loads @ cov @ loads.T,
        log_price=fit.terms[j].transform == "log",
        linear=fit.form == "linear",
    )


def _criterion(law: PredictorLaw, decide_by: str, cost: float) -> object:
    if decide_by == "expected":
        return lambda p: law.expected(np.asarray(p, dtype=np.float64), cost)
    return lambda p: law.quantile(np.asarray(p, dtype=np.float64), cost, CAUTIOUS_LEVEL)


def _search_limits(iv: Interval, reference: float) -> tuple[float, float]:
    low = iv.low if iv.low > 0.0 else reference / SEARCH_SPAN
    high = iv.high if math.isfinite(iv.high) else reference * SEARCH_SPAN
    return low, high


def best_price(
    law: PredictorLaw,
    decide_by: str,
    cost: float,
    iv: Interval,
    *,
    reference: float,
    allowed: FloatArray | None,
    hint: float,
) -> float:
    """The price maximising the criterion of ``decide_by`` on the allowed prices or the interval."""
    score = _criterion(law, decide_by, cost)
    if allowed is not None:
        values = np.asarray(score(allowed))  # type: ignore[operator]
        top = float(values.max())
        ties = np.flatnonzero(values >= top - 1e-12 * max(abs(top), 1e-300))
        return float(allowed[ties[np.argmin(np.abs(allowed[ties] - hint))]])
    low, high = _search_limits(iv, reference)
    if not high > low:
        return low
    grid = low * (high / low) ** np.linspace(0.0, 1.0, DECISION_GRID)
    grid[0], grid[-1] = low, high
    grid = np.sort(np.append(grid, min(max(hint, low), high)))
    values = np.asarray(score(grid))  # type: ignore[operator]
    i = int(np.argmax(values))
    a, b = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    if not b > a:
        return float(grid[i])
    found = optimize.minimize_scalar(
        lambda p: -float(score(p)),  # type: ignore[operator]
        bounds=(a, b),
        method="bounded",
        options={"xatol": 1e-10 * b},
    )
    price = float(found.x)
    return price if -float(found.fun) >= float(values[i]) else float(grid[i])


def _node_curve(law: PredictorLaw, sku: str, form: str) -> tuple[DemandCurve, FloatArray]:
    points, weights = law.nodes()
    curve = DemandCurve(
        sku, form, points[:, :1], points[:, 1:], log_price=law.log_price, linear=law.linear
    )
    return curve, weights


def decision_figures(
    law: PredictorLaw,
    *,
    sku: str,
    form: str,
    decide_by: str,
    cost: float,
    iv: Interval,
    reference: float,
    allowed: FloatArray | None,
    chosen: float,
    current_price: float | None,
) -> PriceDecision:
    """The value of knowing and the comparison with the current price at ``chosen``.

    ``iv`` and ``allowed`` are where each outcome's best price is sought: the allowed
    prices, which may be wider than the decision's own range (see :func:`choose`).

    The value of knowing is None when, with a side of the allowed prices open, outcomes of
    non-negligible weight have no finite best price (their objective grows without limit).
    """
    curve, weights = _node_curve(law, sku, form)
    with np.errstate(over="ignore", invalid="ignore"):
        at_chosen = curve.objective(chosen, cost)[:, 0]
        unbounded = np.zeros(weights.size, dtype=bool)
        if allowed is not None:
            best = curve.objective(allowed[None, :], cost).max(axis=1)
        else:
            low, high = _search_limits(iv, reference)
            n = weights.size
            prices = maximise_batch(curve, cost, np.full(n, low), np.full(n, high))
            best = curve.objective(prices[:, None], cost)[:, 0]
            unbounded = (math.isinf(iv.high) & (prices >= high * (1.0 - 1e-9))) | (
                (not iv.low > 0.0) & (prices <= low * (1.0 + 1e-9))
            )
        loss = np.maximum(best - at_chosen, 0.0)
    weighty = weights > NEGLIGIBLE_WEIGHT
    value = None
    if not np.any(unbounded & weighty) and np.all(np.isfinite(loss[weighty])):
        value = float(weights[weighty] @ loss[weighty])
    gain = chance = None
    if current_price is not None:
        with np.errstate(over="ignore", invalid="ignore"):
            diff = at_chosen - curve.objective(current_price, cost)[:, 0]
        gain = float(weights[weighty] @ diff[weighty])
        chance = float(weights @ (diff > 0.0))
    return PriceDecision(
        decide_by=decide_by,
        cautious_level=CAUTIOUS_LEVEL if decide_by == "cautious" else None,
        expected_objective=float(law.expected(np.array(chosen), cost)),
        value_of_knowing=value,
        expected_gain=gain,
        chance_of_gain=chance,
        held_current=False,
    )


def may_hold(current_price: float | None, iv: Interval, allowed: FloatArray | None) -> bool:
    """Whether keeping the current price is itself allowed (inside the interval and grid)."""
    if current_price is None:
        return False
    if not iv.low * (1.0 - 1e-12) <= current_price <= iv.high * (1.0 + 1e-12):
        return False
    if allowed is None:
        return True
    return bool(np.any(np.abs(allowed - current_price) <= 1e-9 * current_price))


def no_harm(figures: PriceDecision) -> bool:
    """Whether the chosen price passes the do-no-harm check against the current price."""
    if figures.expected_gain is None or figures.chance_of_gain is None:
        return True
    return figures.expected_gain > 0.0 and figures.chance_of_gain >= GAIN_CHANCE


def _check_open(sku: str, law: PredictorLaw, cost: float, iv: Interval) -> None:
    """Raise when ``expected`` has no finite optimum: with any spread in the own-price
    coefficient, the mean of ``units`` grows faster than any power of the price far from
    the data (``exp(v / 2)`` with ``v`` quadratic in ``g(p)``; a normal floored at zero
    grows linearly), so the mean objective is unbounded above without an upper price
    limit, and, for revenue on the log-price forms, without a lower one."""
    if not law.cov[1, 1] > 0.0:
        return
    above = math.isinf(iv.high)
    below = not iv.low > 0.0 and cost == 0.0 and law.log_price
    if above or below:
        direction, fix = ("above", "max_price") if above else ("below", "min_price")
        raise UnboundedObjectiveError(
            sku,
            direction,
            f"{sku}: choosing by expected, the average over the estimate's distribution "
            f"grows without limit as the price moves {direction} the prices seen (the "
            f"estimate's spread grows there) and no constraint stops it: set {fix} or "
            "max_change_pct, keep the observed-range guard (allow_extrapolation=false), "
            "or choose by point or cautious",
        )


def check_decision(decide_by: str) -> None:
    if decide_by not in DECISIONS:
        raise PricingInputError(
            f"decide_by must be one of {', '.join(repr(d) for d in DECISIONS)}; got {decide_by!r}"
        )


def choose(
    fit: DemandFit,
    values: dict[str, float],
    iv: Interval,
    *,
    attainable: tuple[Interval, FloatArray | None] | None = None,
    decide_by: str,
    no_harm_check: bool,
    with_figures: bool = True,
    cost: float,
    current_price: float | None,
    reference: float,
    allowed: FloatArray | None,
    point_price: float,
) -> tuple[float, PriceDecision | None, list[FitWarning]]:
    """The price ``decide_by`` picks (the do-no-harm check applied), its figures and notes.

    ``with_figures=False`` (and no check) returns no figures and skips their quadrature.
    ``attainable``: the allowed prices (interval and grid) without the decision's own limits,
    where the value of knowing looks for each outcome's best (default: ``iv`` and
    ``allowed``). Without a usable covariance the point price stands and a warning says why.
    """
    wide, wide_grid = attainable if attainable is not None else (iv, allowed)
    law = predictor_law(fit, values)
    if law is None:
        reason = (
            "the fit's covariance matrix has undefined entries, so the price is the point "
            "optimum and the value of knowing is not given"
        )
        return point_price, None, [notes.uncertainty_unavailable(reason)]
    price = point_price
    if decide_by == "expected" and allowed is None:
        _check_open(fit.sku, law, cost, iv)
    if decide_by != "point":
        price = best_price(
            law, decide_by, cost, iv, reference=reference, allowed=allowed, hint=point_price
        )

    def figures(chosen: float) -> PriceDecision:
        return decision_figures(
            law,
            sku=fit.sku,
            form=fit.form,
            decide_by=decide_by,
            cost=cost,
            iv=wide,
            reference=reference,
            allowed=wide_grid,
            chosen=chosen,
            current_price=current_price,
        )

    if not (with_figures or no_harm_check):
        return price, None, []
    found = figures(price)
    if no_harm_check and may_hold(current_price, iv, allowed) and not no_harm(found):
        assert current_price is not None
        if price != current_price:
            return current_price, replace(figures(current_price), held_current=True), []
    return price, found, []
