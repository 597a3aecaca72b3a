"""Joint recommended prices for the products of one family: :func:`optimal_family_prices`.

The continuous problem (total profit or revenue over the family's prices, with each
product's price limits as box bounds and its units limits, the ladder rules and the cap
on the family's price index as inequality constraints) is solved by SLSQP with analytic
gradients from three starting points; the best feasible solution wins
(:mod:`models.pricing.joint_problem`). Allowed-price grids are then searched
(:mod:`models.pricing.joint_grid`), and products without a grid are re-optimised around
the chosen grid prices (:mod:`models.pricing.family_setup`). Each product's figures and
the family's totals are read off the solution in :mod:`models.pricing.family_report`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import replace
from typing import Any

from models.money import MoneyText, plain_money
from models.pricing import notes
from models.pricing.constraints import PriceConstraints
from models.pricing.family_report import family_total, product_recommendation
from models.pricing.family_setup import prepare_family, solve_family
from models.pricing.inputs import check_draws, check_objective
from models.pricing.joint_draws import family_draws
from models.pricing.result import (
    FamilyRecommendation,
)
from models.pricing.single import (
    OPTIMUM_WORDS,
    SEARCH_WORDS,
    STATUS_CONSTRAINED,
    STATUS_INTERIOR,
)
from models.result import DemandFit, FitWarning


def optimal_family_prices(
    fits: Mapping[str, DemandFit],
    *,
    objective: str = "profit",
    unit_costs: Mapping[str, float | None] | None = None,
    current_prices: Mapping[str, float | None] | None = None,
    constraints: Mapping[str, PriceConstraints] | None = None,
    order: Sequence[tuple[str, str]] = (),
    max_total_change_pct: float | None = None,
    scenario: Mapping[str, Any] | None = None,
    uncertainty_draws: int = 0,
    seed: int = 0,
    allow_wrong_sign: bool = False,
    money: MoneyText = plain_money,
) -> FamilyRecommendation:
    """Joint prices for a family that maximise total expected profit or revenue.

    Cross-price terms naming products of the family become decision variables; other
    cross prices and covariates stay at the scenario's (default: latest) values.

    Parameters
    ----------
    fits : mapping of sku to DemandFit
    objective : {"profit", "revenue"}
    unit_costs, current_prices : mapping of sku to float or None
    constraints : mapping of sku to PriceConstraints
        Each product's rules (a missing sku gets the default observed-range guard only).
    order : sequence of (a, b)
        Price ladder rules ``price(a) <= price(b)``.
    max_total_change_pct : float, optional
        Cap, in percent, on the move of the family's price index
        ``sum(w * p) / sum(w * p_current)`` whose weights ``w`` are the expected units
        at the current prices (a fixed-basket index); needs every current price.
    scenario : mapping, optional
        Shared values (``{"rival_price": 1.05}``) apply to every fit that has the
        variable; ``{sku: {...}}`` entries apply to one product.
    uncertainty_draws, seed
        Coefficient draws per fit (independent across fits), each re-optimised jointly.
    allow_wrong_sign : bool
        Optimise even when an own-price effect has the wrong sign (is not negative).
    money : callable
        Writes an amount of money in the warnings (default: :func:`~models.money.plain_money`).

    Returns
    -------
    FamilyRecommendation
        One :class:`PriceRecommendation` per sku (sku order) and the totals. A product's
        ``unconstrained_price`` is its best price for the family objective with the
        others at their recommendations and none of its own constraints.

    Raises
    ------
    WrongSignError, MissingUnitCostError, InfeasibleConstraintsError,
    UnboundedObjectiveError, PricingInputError
        As in :func:`models.optimal_price`; constraint names carry the sku
        (``"TEA-004.max_price"``) or name the rule (``"order:TEA-004<=TEA-005"``).

    Examples
    --------
    Two tins priced together; alone the first would sell dearer than the second, so
    the ladder rule "first no dearer than second" binds and prices them alike:

    >>> from models import ModelSpec, fit_demand, simulate_product
    >>> tins = [simulate_product(seed, elasticity=-2.5, sku=f"TEA-{seed}") for seed in (1, 2)]
    >>> fits = {p.sku: fit_demand(p.history, ModelSpec()) for p in tins}
    >>> costs = {p.sku: p.unit_cost for p in tins}
    >>> alone = optimal_family_prices(fits, unit_costs=costs)
    >>> [(r.sku, round(r.recommended.price, 2)) for r in alone.products]
    [('TEA-1', 8.84), ('TEA-2', 7.63)]
    >>> ladder = optimal_family_prices(fits, unit_costs=costs, order=[("TEA-1", "TEA-2")])
    >>> [round(r.recommended.price, 2) for r in ladder.products], ladder.binding_constraints
    ([8.01, 8.01], ('order:TEA-1<=TEA-2',))
    """
    check_objective(objective)
    check_draws(uncertainty_draws)
    setup = prepare_family(
        fits,
        objective,
        unit_costs or {},
        current_prices or {},
        constraints or {},
        order,
        max_total_change_pct,
        scenario,
        allow_wrong_sign,
    )
    problem = setup.problem
    solved, recommended, nit, method = solve_family(setup)
    continuous = solved.prices
    values = problem.values(setup.demand, continuous)
    active = list(
        dict.fromkeys(n for n, v in zip(problem.names(), values, strict=True) if v <= 1e-7)
    )
    products = [
        product_recommendation(setup, i, continuous, recommended, active, method, nit, money)
        for i in range(len(setup.products))
    ]
    warnings: list[FitWarning] = []
    if setup.no_current:
        warnings.append(notes.no_current_figures(setup.no_current))
    figures = None
    if uncertainty_draws:
        figures = family_draws(
            problem,
            setup.fits,
            setup.values,
            continuous=continuous,
            recommended=recommended,
            search=setup.search,
            grid=method != "continuous",
            n=int(uncertainty_draws),
            seed=seed,
        )
        if figures is None:
            reason = "a fit's covariance matrix has undefined entries"
            warnings.append(notes.uncertainty_unavailable(reason))
        else:
            products = [
                replace(
                    r,
                    uncertainty=u,
                    warnings=r.warnings
                    + (
                        (notes.wrong_sign_draws(u.n_wrong_sign, u.draws),) if u.n_wrong_sign else ()
                    ),
                )
                for r, u in zip(products, figures.products, strict=True)
            ]
    family_binding = [n for n in active if "." not in n]
    named = family_binding + [
        f"{r.sku}.{b}"
        for r in products
        for b in r.binding_constraints
        if b not in ("order", "max_total_change_pct")
    ]
    rank = {word: status for status, word in OPTIMUM_WORDS.items()}
    status = max((rank[r.optimum] for r in products), default=STATUS_INTERIOR)
    if family_binding:
        status = max(status, STATUS_CONSTRAINED)
    message = (
        f"Optimum held by constraints: {', '.join(dict.fromkeys(named))}."
        if named
        else "Optimum found inside the allowed prices."
    )
    return FamilyRecommendation(
        objective=objective,
        products=tuple(products),
        total=family_total(setup, products, recommended, figures),
        order=tuple((setup.products[a].sku, setup.products[b].sku) for a, b in problem.order),
        max_total_change_pct=None if max_total_change_pct is None else float(max_total_change_pct),
        binding_constraints=tuple(family_binding),
        warnings=tuple(warnings),
        optimum=OPTIMUM_WORDS[status],
        search=SEARCH_WORDS[method],
        search_steps=nit,
        summary=message,
    )
