"""Business constraints on a price and the price interval they leave open.

Every constraint except the allowed grid (``price_step`` / ``price_endings``) limits the
price from below or above, because expected units are monotone in the own price. The
interval is the intersection of those limits; when it is empty, the conflicting pairs
are named.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields, replace
from typing import Any, Final

import numpy as np

from models._typing import FloatArray
from models.errors import InfeasibleConstraintsError, InvalidConstraintsError

OBSERVED_RANGE: Final = "observed_price_range"
"""Name of the default extrapolation guard when it limits the price."""
EXTRAPOLATION_MARGIN: Final = 0.10
"""The guard widens the observed price range by 10% on each side (our convention)."""
MAX_GRID_PRICES: Final = 2_000_000
"""Largest number of allowed grid prices the exact search enumerates."""
_GRID_DECIMALS: Final = 10


@dataclass(frozen=True)
class NamedLimit:
    """A price floor and/or ceiling that carries a name of its caller's choosing.

    The service turns a jurisdiction's pricing rules into such limits; the name comes
    back in ``binding_constraints`` (and in the conflicts of an empty interval) exactly
    as given, so the caller can tell its own limits apart from the business constraints.

    Examples
    --------
    >>> NamedLimit("rule:hold", low=4.5, high=4.5).high
    4.5

    ``decision_only`` marks a limit a decision rule puts on its own move (the catalogue
    calibration) rather than a rule on which prices may be charged: the price keeps to it,
    but the value of knowing, the best each outcome could attain, looks past it.
    """

    name: str
    low: float | None = None
    high: float | None = None
    decision_only: bool = False


@dataclass(frozen=True)
class PriceConstraints:
    """Rules a recommended price must follow (every field optional).

    Parameters
    ----------
    min_price, max_price : float, optional
        Price bounds.
    max_change_pct : float, optional
        Largest move from the current price, in percent (10 means within +-10%).
    min_margin_pct : float, optional
        Floor on ``(price - unit_cost) / price`` in percent; needs a unit cost.
    price_step : float, optional
        Allowed prices are whole multiples of this step (e.g. 0.05).
    price_endings : tuple of float
        Allowed fractional parts, each in [0, 1) (e.g. ``(0.49, 0.99)``); empty means any.
        Use either ``price_step`` or ``price_endings``.
    max_units : float, optional
        Expected units may not exceed this (stock that can be sold in the period).
    min_units : float, optional
        Expected units must reach at least this.
    allow_extrapolation : bool
        Lift the default guard that keeps prices within the observed price range
        widened by 10% on each side.
    named_limits : tuple of NamedLimit
        Further floors and ceilings under names the caller chooses.

    Raises
    ------
    InvalidConstraintsError
        A value that makes no sense on its own, listing every problem found.

    Examples
    --------
    >>> PriceConstraints(price_endings=[0.99, 0.49]).price_endings
    (0.49, 0.99)
    """

    min_price: float | None = None
    max_price: float | None = None
    max_change_pct: float | None = None
    min_margin_pct: float | None = None
    price_step: float | None = None
    price_endings: tuple[float, ...] = ()
    max_units: float | None = None
    min_units: float | None = None
    allow_extrapolation: bool = False
    named_limits: tuple[NamedLimit, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "named_limits", tuple(self.named_limits or ()))
        endings: Any = self.price_endings
        if endings is None:
            endings = ()
        if isinstance(endings, (list, tuple)):
            try:
                endings = tuple(sorted({float(e) for e in endings}))
            except (TypeError, ValueError):
                endings = tuple(endings)
            object.__setattr__(self, "price_endings", endings)
        problems = _problems(self)
        if problems:
            raise InvalidConstraintsError(problems)

    @property
    def grid_name(self) -> str | None:
        """``"price_step"``, ``"price_endings"`` or None when any price is allowed."""
        if self.price_step is not None:
            return "price_step"
        return "price_endings" if self.price_endings else None

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> PriceConstraints:
        """Validate a JSON-like mapping and build constraints (unknown fields are errors)."""
        if not isinstance(data, Mapping):
            raise InvalidConstraintsError([("constraints", "must be an object")])
        known = {f.name for f in fields(cls)}
        problems = [(str(k), "unknown field") for k in data if k not in known]
        values: dict[str, Any] = {}
        for name in known & set(data):
            value = data[name]
            if name == "named_limits":
                limits = _named_limits(value)
                if limits is None:
                    problems.append((name, "must be a list of {name, low, high} objects"))
                else:
                    values[name] = limits
                continue
            if name == "allow_extrapolation":
                if not isinstance(value, bool):
                    problems.append((name, "must be true or false"))
                    continue
            elif name == "price_endings":
                if value is not None and (
                    not isinstance(value, (list, tuple)) or not all(_is_number(v) for v in value)
                ):
                    problems.append((name, "must be a list of numbers"))
                    continue
            elif value is not None and not _is_number(value):
                problems.append((name, "must be a number"))
                continue
            values[name] = value
        if problems:
            raise InvalidConstraintsError(problems)
        return cls(**values)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready mapping that :meth:`from_dict` accepts."""
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        out["price_endings"] = list(self.price_endings)
        out["named_limits"] = [
            {"name": n.name, "low": n.low, "high": n.high}
            | ({"decision_only": True} if n.decision_only else {})
            for n in self.named_limits
        ]
        return out

    def without_decision_limits(self) -> PriceConstraints:
        """The same rules without the limits marked ``decision_only``: the prices allowed."""
        kept = tuple(n for n in self.named_limits if not n.decision_only)
        return self if len(kept) == len(self.named_limits) else replace(self, named_limits=kept)


def _named_limits(value: Any) -> tuple[NamedLimit, ...] | None:
    """Named limits from their JSON form, or None when the form is wrong."""
    if not isinstance(value, (list, tuple)):
        return None
    out = []
    for item in value:
        if not isinstance(item, Mapping) or set(item) - {"name", "low", "high", "decision_only"}:
            return None
        name, low, high = item.get("name"), item.get("low"), item.get("high")
        if not isinstance(name, str) or not all(v is None or _is_number(v) for v in (low, high)):
            return None
        decision_only = item.get("decision_only", False)
        if not isinstance(decision_only, bool):
            return None
        out.append(NamedLimit(name, low, high, decision_only))
    return tuple(out)


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _problems(c: PriceConstraints) -> list[tuple[str, str]]:
    problems: list[tuple[str, str]] = []
    numeric = (
        "min_price",
        "max_price",
        "max_change_pct",
        "min_margin_pct",
        "price_step",
        "max_units",
        "min_units",
    )
    for name in numeric:
        value = getattr(c, name)
        if value is None:
            continue
        if not _is_number(value) or not math.isfinite(value):
            problems.append((name, "must be a finite number"))
            continue
        if name in ("min_price", "max_change_pct", "max_units", "min_units") and value < 0:
            problems.append((name, "must not be negative"))
        if name in ("max_price", "price_step") and value <= 0:
            problems.append((name, "must be positive"))
        if name == "min_margin_pct" and value >= 100:
            problems.append((name, "must be below 100 (no price has a 100% margin over cost)"))
    for value in c.price_endings:
        if not _is_number(value) or not 0.0 <= value < 1.0:
            problems.append(("price_endings", "every ending must be a number in [0, 1)"))
            break
    if c.price_step is not None and c.price_endings:
        problems.append(("price_endings", "give either price_step or price_endings, not both"))
    if not isinstance(c.allow_extrapolation, bool):
        problems.append(("allow_extrapolation", "must be true or false"))
    for limit in c.named_limits:
        if not isinstance(limit, NamedLimit) or not limit.name:
            problems.append(("named_limits", "each must be a NamedLimit with a name"))
            continue
        for value in (limit.low, limit.high):
            if value is not None and (not _is_number(value) or not math.isfinite(value)):
                problems.append(("named_limits", f"{limit.name}: limits must be finite numbers"))
    return problems


@dataclass(frozen=True)
class Bound:
    """One limit on the price and the constraint it comes from."""

    name: str
    value: float


@dataclass(frozen=True)
class Interval:
    """Prices allowed by the constraints: ``low <= price <= high``."""

    low: float
    high: float
    lower: tuple[Bound, ...]
    upper: tuple[Bound, ...]

    def sources(self, side: str, tol: float = 1e-9) -> list[str]:
        """Constraints that set the low (``side="low"``) or the high end."""
        bounds, edge = (self.lower, self.low) if side == "low" else (self.upper, self.high)
        return [b.name for b in bounds if abs(b.value - edge) <= tol * max(abs(edge), 1e-300)]


def price_limits(
    constraints: PriceConstraints,
    *,
    unit_cost: float | None,
    current_price: float | None,
    price_range: tuple[float, float],
) -> tuple[list[Bound], list[Bound]]:
    """Lower and upper limits that depend on the price alone (not on demand)."""
    c = constraints
    lower: list[Bound] = []
    upper: list[Bound] = []
    if c.min_price is not None:
        lower.append(Bound("min_price", float(c.min_price)))
    if c.max_price is not None:
        upper.append(Bound("max_price", float(c.max_price)))
    if c.max_change_pct is not None and current_price is not None:
        share = c.max_change_pct / 100.0
        if share < 1.0:
            lower.append(Bound("max_change_pct", current_price * (1.0 - share)))
        upper.append(Bound("max_change_pct", current_price * (1.0 + share)))
    if c.min_margin_pct is not None and unit_cost is not None:
        lower.append(Bound("min_margin_pct", unit_cost / (1.0 - c.min_margin_pct / 100.0)))
    for limit in c.named_limits:
        if limit.low is not None:
            lower.append(Bound(limit.name, float(limit.low)))
        if limit.high is not None:
            upper.append(Bound(limit.name, float(limit.high)))
    if not c.allow_extrapolation:
        low, high = price_range
        lower.append(Bound(OBSERVED_RANGE, low * (1.0 - EXTRAPOLATION_MARGIN)))
        upper.append(Bound(OBSERVED_RANGE, high * (1.0 + EXTRAPOLATION_MARGIN)))
    return lower, upper


def _describe(bound: Bound, side: str) -> str:
    if bound.name == "positive_price":
        return "prices must be positive"
    word = "at least" if side == "low" else "at most"
    needs = "needs a price of" if side == "low" else "allows a price of"
    if math.isinf(bound.value):
        return f"{bound.name} cannot be met at any price"
    return f"{bound.name} {needs} {word} {bound.value:.6g}"


def interval(
    lower: Sequence[Bound],
    upper: Sequence[Bound],
    *,
    label: str = "",
    prefix: str = "",
    tol: float = 1e-12,
) -> Interval:
    """Intersect the limits; raise :class:`InfeasibleConstraintsError` naming every conflict.

    ``label`` (a sku) starts the message; ``prefix`` is put before each constraint name.
    """
    low = max((b.value for b in lower), default=0.0)
    high = min((b.value for b in upper), default=math.inf)
    if low > high * (1.0 + tol) or math.isinf(low) or high <= 0.0:
        lows = [b for b in lower if math.isfinite(b.value)] + [Bound("positive_price", 0.0)]
        impossible = [(b, b) for b in lower if math.isinf(b.value)]
        pairs = impossible + [
            (lo, up) for lo in lows for up in upper if lo.value > up.value * (1.0 + tol)
        ]
        names = [f"{prefix}{b.name}" for pair in pairs for b in pair if b.name != "positive_price"]
        detail = "; ".join(
            _describe(lo, "low")
            if lo is up
            else f"{_describe(lo, 'low')}, but {_describe(up, 'high')}"
            for lo, up in pairs
        )
        raise InfeasibleConstraintsError(
            names,
            f"{label + ': ' if label else ''}no price satisfies every constraint: {detail}",
        )
    return Interval(low=low, high=high, lower=tuple(lower), upper=tuple(upper))


def grid_prices(constraints: PriceConstraints, low: float, high: float) -> FloatArray | None:
    """Every allowed grid price in ``[low, high]`` in increasing order (None without a grid).

    Raises
    ------
    InvalidConstraintsError
        The grid would have more than :data:`MAX_GRID_PRICES` prices in the interval.
    """
    slack = 1e-9
    if constraints.price_step is not None:
        step = float(constraints.price_step)
        first = math.ceil(low / step - slack)
        if math.isinf(high):
            raise InvalidConstraintsError([("price_step", "needs an upper price limit")])
        last = math.floor(high / step + slack)
        count = last - first + 1
        if count > MAX_GRID_PRICES:
            raise InvalidConstraintsError(
                [("price_step", f"{count} steps in the allowed range; use a coarser step")]
            )
        prices = np.round(np.arange(first, last + 1) * step, _GRID_DECIMALS)
    elif constraints.price_endings:
        if math.isinf(high):
            raise InvalidConstraintsError([("price_endings", "needs an upper price limit")])
        endings = np.array(constraints.price_endings)
        whole = np.arange(math.floor(low), math.floor(high) + 1, dtype=np.float64)
        if whole.size * endings.size > MAX_GRID_PRICES:
            raise InvalidConstraintsError(
                [("price_endings", "too many allowed prices in the range; add price limits")]
            )
        prices = np.round((whole[:, None] + endings[None, :]).ravel(), _GRID_DECIMALS)
    else:
        return None
    keep = (prices >= low * (1.0 - slack)) & (prices <= high * (1.0 + slack)) & (prices > 0.0)
    result: FloatArray = np.asarray(prices[keep], dtype=np.float64)
    return result
