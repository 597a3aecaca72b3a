"""Watching outcomes: what a fit expected in periods it never saw, and whether its misses
come more often than its prediction intervals allow.

:func:`expected_outcomes` reads a fit over new periods of a history at the prices actually
charged and the drivers of each period (seasonal and trend terms included), with the
same prediction interval as :func:`models.predict`. :func:`drift_check` runs a one-sided
cumulative sum over the periods' misses (a unit count outside its interval): the Bernoulli
form of Page's CUSUM (E. S. Page, "Continuous inspection schemes", Biometrika 41 (1954)
100-115; for a Bernoulli stream, M. R. Reynolds and Z. G. Stoumbos, Journal of Quality
Technology 31 (1999) 87-108; both cited from memory). With ``p0`` the miss rate the interval
allows (``1 - level``) and ``p1`` the rate it should catch,

    S_0 = 0,  S_t = max(0, S_{t-1} + x_t ln(p1 / p0) + (1 - x_t) ln((1 - p1) / (1 - p0)))

and the flag rises at the first ``t`` with ``S_t >= threshold``. Each miss adds
``ln(p1 / p0)``; each period inside the interval takes a little away, so isolated misses
fade and a run of them raises the flag.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import Final

import numpy as np

from models._typing import BoolArray, FloatArray
from models.design import build_design
from models.elasticity import critical_value
from models.forecast import expected_units
from models.history import History
from models.result import DemandFit
from models.spec import LOG_RESPONSE_FORMS

DRIFT_RATE: Final = 0.25
"""The miss rate the drift check is tuned to catch (``p1``)."""
DRIFT_THRESHOLD: Final = 7.0
"""Where the cumulative sum raises the flag; chosen on the invented shop so that 200 periods
of an unchanged curve leave it down in at least 95% of seeds (tests/models/test_outcomes.py)."""


@dataclass(frozen=True)
class ExpectedOutcomes:
    """Per period of a history: the units a fit expected and its prediction interval.

    ``nan`` where a value the fit needs is missing.
    """

    periods: tuple[str, ...]
    realised: FloatArray
    expected: FloatArray
    low: FloatArray
    high: FloatArray
    level: float

    @property
    def inside(self) -> BoolArray:
        return np.asarray((self.realised >= self.low) & (self.realised <= self.high))


@dataclass(frozen=True)
class DriftCheck:
    """The cumulative sum over the misses, period by period, and where the flag rose.

    ``flagged`` stays up once the sum has reached the threshold: the periods watched are
    those after the fit, so a new fit starts a new watch.
    """

    statistic: tuple[float, ...]
    flagged: bool
    first_flagged: int | None
    allowed_rate: float
    drift_rate: float
    threshold: float
    misses: int
    periods: int


def expected_outcomes(
    fit: DemandFit, history: History, *, after: str | None, level: float = 0.95
) -> ExpectedOutcomes:
    """What ``fit`` expected in the periods of ``history`` after ``after`` (an ISO date;
    None for all), at their own prices and drivers, with ``level`` prediction intervals.

    Examples
    --------
    >>> from models import ModelSpec, fit_demand, simulate_product
    >>> product = simulate_product(4, n_periods=80)
    >>> fit = fit_demand(product.history, ModelSpec(form="log-log"))
    >>> seen = expected_outcomes(fit, product.history, after=None)
    >>> len(seen.periods), bool(seen.inside.mean() > 0.8)
    (80, True)
    """
    if not 0 < level < 1:
        raise ValueError("level must lie strictly between 0 and 1")
    spec = dataclasses.replace(
        fit.spec,
        window_periods=max(history.n_periods, 4),
        exclude_stockouts=False,
        instruments=(),
    )
    design = build_design(history, spec, fit.form)
    names = [t.name for t in design.terms]
    rows = design.regressors[:, [names.index(t.name) for t in fit.terms]]
    keep = np.ones(len(design.periods), dtype=bool)
    if after is not None:
        keep = design.periods > np.datetime64(after, "D")
    rows, periods = rows[keep], design.periods[keep]
    at = np.searchsorted(history.periods, periods)
    realised = np.asarray(history.units[at], dtype=np.float64)
    mean = expected_units(fit.form, rows, fit.params, fit.smearing)
    linear = rows @ fit.params
    param_var = np.einsum("ij,jk,ik->i", rows, fit.cov, rows)
    crit = critical_value(fit, level)
    sigma2 = fit.quality.sigma**2
    if fit.form == "linear":
        half = crit * np.sqrt(sigma2 + param_var)
        low, high = np.maximum(mean - half, 0.0), mean + half
    elif fit.form in LOG_RESPONSE_FORMS:
        half = crit * np.sqrt(sigma2 + param_var)
        low, high = np.exp(linear - half), np.exp(linear + half)
    else:
        half = crit * np.sqrt(sigma2 * mean + mean**2 * param_var)
        low, high = np.maximum(mean - half, 0.0), mean + half
    return ExpectedOutcomes(
        periods=tuple(str(p) for p in periods.astype("datetime64[D]")),
        realised=realised,
        expected=np.asarray(mean, dtype=np.float64),
        low=np.asarray(low, dtype=np.float64),
        high=np.asarray(high, dtype=np.float64),
        level=level,
    )


def drift_check(
    misses: BoolArray | list[bool],
    *,
    allowed_rate: float,
    drift_rate: float = DRIFT_RATE,
    threshold: float = DRIFT_THRESHOLD,
) -> DriftCheck:
    """The Bernoulli CUSUM over ``misses`` (see the module's description).

    Examples
    --------
    >>> check = drift_check([False] * 10 + [True] * 5, allowed_rate=0.05)
    >>> check.flagged, check.first_flagged, check.misses
    (True, 14, 5)
    """
    if not 0 < allowed_rate < drift_rate < 1:
        raise ValueError("need 0 < allowed_rate < drift_rate < 1")
    up = math.log(drift_rate / allowed_rate)
    down = math.log((1 - drift_rate) / (1 - allowed_rate))
    x = np.asarray(misses, dtype=bool)
    s, path, first = 0.0, [], None
    for t, miss in enumerate(x):
        s = max(0.0, s + (up if miss else down))
        path.append(s)
        if first is None and s >= threshold:
            first = t
    return DriftCheck(
        statistic=tuple(path),
        flagged=first is not None,
        first_flagged=first,
        allowed_rate=allowed_rate,
        drift_rate=drift_rate,
        threshold=threshold,
        misses=int(x.sum()),
        periods=len(x),
    )
