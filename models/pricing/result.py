"""What a price recommendation returns: frozen records with JSON-safe ``to_dict``."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from models.result import FitWarning, clean


@dataclass(frozen=True)
class PricePoint:
    """Figures at one price (``profit`` and ``margin_pct`` are None without a unit cost)."""

    price: float
    units: float
    revenue: float
    profit: float | None
    margin_pct: float | None

    def to_dict(self) -> dict[str, Any]:
        return dict(clean(vars(self)))


@dataclass(frozen=True)
class PriceUncertainty:
    """How the recommendation moves when the coefficients are drawn from their estimated
    distribution (multivariate normal with the fit's covariance).

    Attributes
    ----------
    draws : int
        Coefficient draws made.
    level : float
        Coverage of the intervals (0.9: 5th to 95th percentile of the draws).
    price_interval : (float, float) or None
        Interval of the optimal price, re-optimised per draw under the same constraints.
    profit_interval, revenue_interval : (float, float) or None
        Interval of expected profit / revenue at the recommended price.
    prob_better_than_current : float or None
        Share of draws in which the recommended price strictly beats the current price
        on the objective (0 when they are equal; None without a current price).
    n_used : int
        Draws whose optimal price enters ``price_interval``.
    n_wrong_sign : int
        Draws whose own-price effect is non-negative.
    n_infeasible : int
        Draws for which the units constraints leave no price (left out).
    n_unbounded : int
        Draws whose objective is unbounded with no price limit to stop it (left out).
    """

    draws: int
    level: float
    price_interval: tuple[float, float] | None
    profit_interval: tuple[float, float] | None
    revenue_interval: tuple[float, float] | None
    prob_better_than_current: float | None
    n_used: int
    n_wrong_sign: int
    n_infeasible: int
    n_unbounded: int

    def to_dict(self) -> dict[str, Any]:
        return dict(clean(vars(self)))


@dataclass(frozen=True)
class PriceDecision:
    """How the price was chosen over the estimate's distribution, and what not knowing costs.

    Attributes
    ----------
    decide_by : str
        ``"point"`` (fitted coefficients taken as exact), ``"expected"`` (best mean
        objective over the estimate's distribution) or ``"cautious"`` (best low quantile).
    cautious_level : float or None
        The quantile the cautious rule maximises (0.1: the figure exceeded in nine of ten
        outcomes); None for the other rules.
    expected_objective : float
        Mean profit (or revenue) at the recommended price over the distribution.
    value_of_knowing : float or None
        Expected profit (or revenue) per period lost because the coefficients are not
        known exactly: the mean of the best attainable figure minus the figure at the
        recommended price, over the distribution, within the same allowed prices. None
        when, with no upper (or lower) price limit, the best price of some outcomes is
        unbounded.
    expected_gain : float or None
        Mean gain of the recommended price over the current one (None without a current
        price); 0 when the current price is kept.
    chance_of_gain : float or None
        Share of the distribution in which the recommended price beats the current one.
    held_current : bool
        The do-no-harm check kept the current price: the move did not win clearly enough.
    """

    decide_by: str
    cautious_level: float | None
    expected_objective: float
    value_of_knowing: float | None
    expected_gain: float | None
    chance_of_gain: float | None
    held_current: bool

    def to_dict(self) -> dict[str, Any]:
        return dict(clean(vars(self)))


@dataclass(frozen=True)
class CurvePoint:
    """One point of the demand and money curves for plotting (``feasible``: inside the
    allowed interval, not checked against a price grid)."""

    price: float
    units: float
    revenue: float
    profit: float | None
    feasible: bool

    def to_dict(self) -> dict[str, Any]:
        return dict(clean(vars(self)))


@dataclass(frozen=True)
class PriceRecommendation:
    """One product's recommended price under constraints.

    Attributes
    ----------
    sku, form, objective : str
        Product, fitted demand form, ``"profit"`` or ``"revenue"``.
    unit_cost : float or None
    current, recommended : PricePoint
        Figures at the current price (None without one) and at the recommendation.
    change_pct : float or None
        Recommended against current price, in percent.
    unconstrained_price : float or None
        The maximiser with no constraint at all (in a family: this product's best price
        with the others at their recommendations); None when the objective is unbounded.
    binding_constraints : tuple of str
        Constraints that hold the price away from where the objective would take it.
    feasible_range : (float, float or None)
        Prices the constraints allow, before the grid (None: no upper limit). In a
        family, the product's own price limits only (units limits, ladder rules and
        the index cap couple the products).
    decision_figures : PriceDecision or None
        How the price was chosen under uncertainty and the value of knowing (None when
        the fit's covariance is unusable, or in a family).
    uncertainty : PriceUncertainty or None
        In a family, ``profit_interval`` and ``prob_better_than_current`` concern this
        product's own figures at the joint prices (the family's are in the total).
    warnings : tuple of FitWarning
    curve : tuple of CurvePoint or None
    scenario : dict of str to float
        Variable values the demand was evaluated at (own price excluded).
    optimum : str
        What kind of optimum the price is: ``"interior"`` (the objective's own best
        price, inside the allowed prices), ``"held_by_constraint"`` (a constraint holds the
        price where it is) or ``"no_finite_optimum"`` (the objective keeps improving
        toward a bound, so the price sits on that bound).
    search : str
        How the price was found: ``"continuous"`` (any price in the allowed range),
        ``"allowed_prices"`` (every allowed price of a step or endings rule compared) or,
        in large families, ``"allowed_prices_local"`` (allowed prices near the continuous
        optimum compared).
    search_steps : int
        Steps of the search: root-finder iterations (continuous) or allowed prices
        compared.
    summary : str
        One sentence on the optimum in plain words.
    """

    sku: str
    form: str
    objective: str
    unit_cost: float | None
    current: PricePoint | None
    recommended: PricePoint
    change_pct: float | None
    unconstrained_price: float | None
    binding_constraints: tuple[str, ...]
    feasible_range: tuple[float, float | None]
    uncertainty: PriceUncertainty | None
    warnings: tuple[FitWarning, ...]
    curve: tuple[CurvePoint, ...] | None
    scenario: dict[str, float]
    optimum: str
    search: str
    search_steps: int
    summary: str
    decision_figures: PriceDecision | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe mapping (no NaN or infinity)."""
        out: dict[str, Any] = clean(
            {
                "sku": self.sku,
                "form": self.form,
                "objective": self.objective,
                "unit_cost": self.unit_cost,
                "current": None if self.current is None else self.current.to_dict(),
                "recommended": self.recommended.to_dict(),
                "change_pct": self.change_pct,
                "unconstrained_price": self.unconstrained_price,
                "binding_constraints": list(self.binding_constraints),
                "feasible_range": {
                    "low": self.feasible_range[0],
                    "high": self.feasible_range[1],
                },
                "uncertainty": None if self.uncertainty is None else self.uncertainty.to_dict(),
                "warnings": [{"code": w.code, "message": w.message} for w in self.warnings],
                "curve": None if self.curve is None else [p.to_dict() for p in self.curve],
                "scenario": self.scenario,
                "optimum": self.optimum,
                "search": self.search,
                "search_steps": self.search_steps,
                "summary": self.summary,
                "decision_figures": (
                    None if self.decision_figures is None else self.decision_figures.to_dict()
                ),
            }
        )
        return out


@dataclass(frozen=True)
class TotalFigures:
    """Family totals at one set of prices."""

    units: float
    revenue: float
    profit: float | None

    def to_dict(self) -> dict[str, Any]:
        return dict(clean(vars(self)))


@dataclass(frozen=True)
class FamilyTotal:
    """Totals of a family recommendation.

    ``objective_change_pct`` compares the recommended with the current total objective;
    the intervals, ``prob_better_than_current`` and ``value_of_knowing`` (the family
    objective per period expected to be lost because the demand curves are not known
    exactly) come from the coefficient draws.
    """

    current: TotalFigures | None
    recommended: TotalFigures
    objective_change_pct: float | None
    price_index_change_pct: float | None
    profit_interval: tuple[float, float] | None
    revenue_interval: tuple[float, float] | None
    prob_better_than_current: float | None
    value_of_knowing: float | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = clean(
            {
                **vars(self),
                "current": None if self.current is None else self.current.to_dict(),
                "recommended": self.recommended.to_dict(),
            }
        )
        return out


@dataclass(frozen=True)
class FamilyRecommendation:
    """Joint prices for the products of one family.

    Attributes
    ----------
    objective : str
    products : tuple of PriceRecommendation
        One per sku, in sku order.
    total : FamilyTotal
    order : tuple of (str, str)
        Ladder rules ``price(a) <= price(b)``.
    max_total_change_pct : float or None
        Cap on the move of the family's price index (current units as weights).
    binding_constraints : tuple of str
        Family-level constraints active at the solution (``"order:A<=B"``,
        ``"max_total_change_pct"``).
    warnings : tuple of FitWarning
        Family-level warnings (product warnings sit with the products).
    optimum, search, search_steps, summary
        As in :class:`PriceRecommendation`; ``search_steps`` counts the iterations of the
        joint continuous search from its chosen start (or the combinations of allowed
        prices compared).
    """

    objective: str
    products: tuple[PriceRecommendation, ...]
    total: FamilyTotal
    order: tuple[tuple[str, str], ...]
    max_total_change_pct: float | None
    binding_constraints: tuple[str, ...]
    warnings: tuple[FitWarning, ...]
    optimum: str
    search: str
    search_steps: int
    summary: str

    def product(self, sku: str) -> PriceRecommendation:
        """The recommendation of one product."""
        for item in self.products:
            if item.sku == sku:
                return item
        raise KeyError(sku)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe mapping (no NaN or infinity)."""
        out: dict[str, Any] = clean(
            {
                "objective": self.objective,
                "products": [p.to_dict() for p in self.products],
                "total": self.total.to_dict(),
                "order": [list(pair) for pair in self.order],
                "max_total_change_pct": self.max_total_change_pct,
                "binding_constraints": list(self.binding_constraints),
                "warnings": [{"code": w.code, "message": w.message} for w in self.warnings],
                "optimum": self.optimum,
                "search": self.search,
                "search_steps": self.search_steps,
                "summary": self.summary,
            }
        )
        return out
