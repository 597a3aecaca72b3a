"""Response bodies of watched outcomes and drift."""

from __future__ import annotations

import math

from pydantic import BaseModel, Field

from service.estimation.outcomes import LEVEL, Watched

RULE = (
    "A one-sided cumulative sum over the periods whose units fell outside the fit's "
    f"{LEVEL:.0%} prediction interval (Page's CUSUM for a yes/no stream): each such period adds "
    "ln(p1 / p0), each period inside adds ln((1 - p1) / (1 - p0)), never below 0, with p0 "
    "the share the interval allows outside and p1 the share it is tuned to catch; the flag "
    "rises when the sum reaches the threshold and stays up until a new active fit."
)


class OutcomePeriodOut(BaseModel):
    period: str
    price: float | None = Field(description="The price actually charged")
    realised: float = Field(description="Units sold")
    expected: float | None = Field(
        description="Units the active fit expected at that price and the period's drivers"
    )
    interval: tuple[float, float] | None
    inside: bool | None = Field(description="Whether the units fell inside the interval")
    error: float | None = Field(description="realised - expected")
    counted: bool = Field(
        description="Whether the period counts toward errors and drift (false when out of "
        "stock, or when a driver the fit needs is missing)"
    )


class DriftOut(BaseModel):
    flagged: bool
    first_flagged_period: str | None
    statistic: float = Field(description="The cumulative sum after the latest period")
    threshold: float
    allowed_rate: float = Field(description="p0: the share of periods the interval allows outside")
    drift_rate: float = Field(
        description="p1: the share of periods outside the check is tuned to catch"
    )
    periods_outside: int
    periods_counted: int
    rule: str
    action: str


class OutcomesOut(BaseModel):
    sku: str
    family: str | None
    fit_id: int
    level: float
    watched_from: str | None = Field(
        description="Periods after this date are watched: the later of the first stored "
        "recommendation's date and the active fit's last period (null: no recommendation yet)"
    )
    wape: float | None = Field(
        description="Forecast error of the watched periods: "
        "sum |realised - expected| / sum realised"
    )
    periods: list[OutcomePeriodOut]
    drift: DriftOut | None = Field(description="Null until a period is watched")


class FamilyProductOutcomeOut(BaseModel):
    sku: str
    fit_id: int | None
    periods_counted: int
    wape: float | None
    drift_flagged: bool | None
    reason: str | None = Field(description="Why the product is not watched, when it is not")


class FamilyPeriodOut(BaseModel):
    period: str
    realised: float = Field(description="Units sold, summed over the products counted")
    expected: float = Field(description="Units the active fits expected, summed likewise")
    error: float = Field(description="realised - expected")
    products: int = Field(description="How many products the period counts")


class FamilyOutcomesOut(BaseModel):
    family: str
    wape: float | None = Field(description="Over every watched period of the family's products")
    products_flagged: int
    products: list[FamilyProductOutcomeOut]
    periods: list[FamilyPeriodOut] = Field(
        description="The family's forecast error over time: counted periods summed by period"
    )


def _num(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def drift_out(watched: Watched) -> DriftOut | None:
    check, seen = watched.drift, watched.outcomes
    if check is None or seen is None or check.periods == 0:
        return None
    counted_periods = [p for p, c in zip(seen.periods, watched.counted(), strict=True) if c]
    first = None if check.first_flagged is None else counted_periods[check.first_flagged]
    action = (
        f"refit suggested: POST /v1/products/{watched.sku}/fits (nothing is refitted "
        "automatically; a person decides)"
        if check.flagged
        else "none"
    )
    return DriftOut(
        flagged=check.flagged,
        first_flagged_period=first,
        statistic=check.statistic[-1],
        threshold=check.threshold,
        allowed_rate=check.allowed_rate,
        drift_rate=check.drift_rate,
        periods_outside=check.misses,
        periods_counted=check.periods,
        rule=RULE,
        action=action,
    )


def outcomes_out(watched: Watched) -> OutcomesOut:
    seen = watched.outcomes
    periods = []
    if seen is not None:
        counted = watched.counted()
        for i, period in enumerate(seen.periods):
            expected = _num(seen.expected[i])
            low, high = _num(seen.low[i]), _num(seen.high[i])
            known = expected is not None and low is not None and high is not None
            periods.append(
                OutcomePeriodOut(
                    period=period,
                    price=watched.prices[i],
                    realised=float(seen.realised[i]),
                    expected=expected,
                    interval=(low, high)
                    if known and low is not None and high is not None
                    else None,
                    inside=bool(seen.inside[i]) if known else None,
                    error=float(seen.realised[i]) - expected if expected is not None else None,
                    counted=bool(counted[i]),
                )
            )
    return OutcomesOut(
        sku=watched.sku,
        family=watched.family,
        fit_id=watched.fit_id,
        level=LEVEL,
        watched_from=None if watched.watched_from is None else watched.watched_from.isoformat(),
        wape=watched.wape,
        periods=periods,
        drift=drift_out(watched),
    )


def family_outcomes_out(
    family: str, watched: list[Watched], skipped: list[tuple[str, str]]
) -> FamilyOutcomesOut:
    rows = [
        FamilyProductOutcomeOut(
            sku=w.sku,
            fit_id=w.fit_id,
            periods_counted=int(w.counted().sum()),
            wape=w.wape,
            drift_flagged=None if w.drift is None else w.drift.flagged,
            reason=None if w.outcomes is not None else "no stored recommendation yet",
        )
        for w in watched
    ]
    rows += [
        FamilyProductOutcomeOut(
            sku=sku, fit_id=None, periods_counted=0, wape=None, drift_flagged=None, reason=why
        )
        for sku, why in skipped
    ]
    by_period: dict[str, list[float]] = {}
    for w in watched:
        if w.outcomes is None:
            continue
        for period, use, real, exp in zip(
            w.outcomes.periods,
            w.counted(),
            w.outcomes.realised,
            w.outcomes.expected,
            strict=True,
        ):
            if use:
                sums = by_period.setdefault(period, [0.0, 0.0, 0.0])
                sums[0] += float(real)
                sums[1] += float(exp)
                sums[2] += 1
    total = sum(w.realised_total() for w in watched)
    return FamilyOutcomesOut(
        family=family,
        wape=sum(w.absolute_error() for w in watched) / total if total > 0 else None,
        products_flagged=sum(1 for w in watched if w.drift is not None and w.drift.flagged),
        products=sorted(rows, key=lambda r: r.sku),
        periods=[
            FamilyPeriodOut(period=p, realised=r, expected=e, error=r - e, products=int(n))
            for p, (r, e, n) in sorted(by_period.items())
        ],
    )
