"""The pricing use cases: optimal prices for one product or a family, and storing them.

The numbers come from the numerical library (`models.optimal_price` and
`models.optimal_family_prices`, called from this module only); this module finds the
active fits, fills defaults from the catalogue and stores the recommendations it gives.
The routes, the reprice job and the analyst view's charts all price through it.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any, Protocol, cast

from sqlalchemy import Table, and_, func, insert, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models import (
    DemandFit,
    MoveEvidence,
    PriceConstraints,
    PriceRecommendation,
    calibrated_limit,
    move_evidence,
    optimal_family_prices,
    optimal_price,
)
from service.core.errors import (
    Conflict,
    ErrorItem,
    InvalidInput,
    NotFound,
    library_errors,
)
from service.core.tables import PriceEntryRow, ProductRow, RecommendationRow, as_utc, utcnow
from service.estimation.fits import active_fit, product_with_active_fit
from service.pricing import calibration, price_record, review, rule_limits
from service.pricing.decision_schemas import CALIBRATED, DEFAULT_NO_HARM_CHECK
from service.pricing.money import money_text, round_recommendation
from service.pricing.rule_limits import RuleLimits
from service.pricing.schemas import ConstraintsIn, FamilyPriceRequest, OptimalPriceRequest


class PricedProduct(Protocol):
    """What pricing reads of a product: any view of the catalogue record that has these."""

    @property
    def sku(self) -> str: ...
    @property
    def unit_cost(self) -> float | None: ...
    @property
    def current_price(self) -> float | None: ...
    @property
    def min_price(self) -> float | None: ...
    @property
    def max_price(self) -> float | None: ...
    @property
    def currency(self) -> str: ...


def price_constraints(product: PricedProduct, rules: ConstraintsIn) -> PriceConstraints:
    """Request rules, with the product's own price bounds where the request has none."""
    values = rules.model_dump()
    values["min_price"] = (
        values["min_price"] if values["min_price"] is not None else (product.min_price)
    )
    values["max_price"] = (
        values["max_price"] if values["max_price"] is not None else (product.max_price)
    )
    values["price_endings"] = tuple(values["price_endings"])
    with library_errors():
        return PriceConstraints(**values)


def with_rules(constraints: PriceConstraints, rules: RuleLimits | None) -> PriceConstraints:
    """The constraints with the jurisdiction rules' limits added under the rules' names."""
    if rules is None or not rules.limits:
        return constraints
    with library_errors():
        return replace(constraints, named_limits=rules.named_limits())


def current_price(product: PricedProduct, fit: DemandFit, given: float | None) -> float | None:
    if given is not None:
        return given
    if product.current_price is not None:
        return product.current_price
    return fit.variable_latest.get("price")


def check_scenario(fit: DemandFit, scenario: dict[str, Any], prefix: str = "scenario") -> None:
    """Refuse scenario values for variables the fit does not have."""
    known = set(fit.variable_means) - {"price"}
    unknown = sorted(set(scenario) - known)
    if unknown:
        raise InvalidInput(
            "the scenario names variables the fit does not have",
            errors=[
                ErrorItem(
                    field=f"{prefix}.{name}",
                    message=f"not a variable of the fit; known: {sorted(known)}",
                )
                for name in unknown
            ],
        )


def price_product(
    fit: DemandFit,
    product: PricedProduct,
    request: OptimalPriceRequest,
    *,
    scenario: dict[str, float] | None = None,
    rules: RuleLimits | None = None,
    move_spread: float | None = None,
) -> PriceRecommendation:
    """One product's optimal price under the request's rules, the product's own terms
    filling what the request leaves out (the one place a single price is worked out);
    prices in the currency's minor unit (:func:`~service.pricing.money.round_recommendation`).
    ``rules``: the limits of the jurisdiction rules in effect, as named limits.
    ``move_spread``: the catalogue's spread of moves for ``decide_by: calibrated``
    (:func:`move_spread_for`).

    Raises domain errors: :class:`~service.core.errors.WrongSign` when the fit says
    demand rises with price (unless ``allow_wrong_sign``),
    :class:`~service.core.errors.InvalidInput` for rules no price meets or numbers the
    arithmetic cannot handle.
    """
    unit_cost = request.unit_cost if request.unit_cost is not None else product.unit_cost
    current = current_price(product, fit, request.current_price)
    constraints = with_rules(price_constraints(product, request.constraints), rules)
    values = request.scenario if scenario is None else scenario
    decide_by: str = request.decide_by
    check = request.no_harm_check
    with library_errors(subject="no price can be recommended from this fit", spec_field="body"):
        if decide_by == CALIBRATED:
            decide_by, check, constraints = _calibrated(
                fit,
                unit_cost=unit_cost if request.objective == "profit" else None,
                current=current,
                constraints=constraints,
                scenario=values,
                move_spread=move_spread,
                check=check,
            )
        found = optimal_price(
            fit,
            objective=request.objective,
            unit_cost=unit_cost,
            current_price=current,
            constraints=constraints,
            scenario=values,
            uncertainty_draws=request.uncertainty_draws,
            seed=request.seed,
            curve_points=request.curve_points,
            allow_wrong_sign=request.allow_wrong_sign,
            money=money_text(product.currency),
            decide_by=decide_by,
            no_harm_check=DEFAULT_NO_HARM_CHECK if check is None else check,
        )
    if request.decide_by == CALIBRATED and found.decision_figures is not None:
        figures = replace(found.decision_figures, decide_by=CALIBRATED)
        found = replace(found, decision_figures=figures)
    return round_recommendation(found, product.currency)


def _calibrated(
    fit: DemandFit,
    *,
    unit_cost: float | None,
    current: float | None,
    constraints: PriceConstraints,
    scenario: dict[str, Any],
    move_spread: float | None,
    check: bool | None,
) -> tuple[str, bool | None, PriceConstraints]:
    """``calibrated``: the point optimum within the reach the catalogue's spread allows; the
    cautious choice (with the do-no-harm check unless turned off) where there is no spread
    (fewer than three products priced), no current price or unit cost, or no evidence."""
    evidence: MoveEvidence | None = None
    if move_spread is not None and unit_cost is not None and current is not None:
        evidence = move_evidence(
            fit,
            unit_cost=unit_cost,
            current_price=current,
            constraints=constraints,
            scenario=scenario,
            cautious=False,  # the catalogue's spread has it; this product needs its point move
        )
    if move_spread is None or evidence is None or current is None:
        return "cautious", check, constraints
    limit = calibrated_limit(evidence, move_spread, current)
    if limit is not None:
        constraints = replace(constraints, named_limits=(*constraints.named_limits, limit))
    return "point", bool(check), constraints


def _evidence_of(
    fit: DemandFit, unit_cost: float, current: float, constraints: PriceConstraints
) -> MoveEvidence | None:
    return move_evidence(fit, unit_cost=unit_cost, current_price=current, constraints=constraints)


def move_spread_for(session: Session, decide_by: str) -> float | None:
    """The catalogue's spread of moves when ``decide_by`` is ``calibrated`` (else None)."""
    if decide_by != CALIBRATED:
        return None
    return calibration.catalogue_move_spread(session, _evidence_of)


@dataclass(frozen=True)
class Priced:
    """A recommendation worked out in a read transaction, ready to be stored."""

    product_id: int
    sku: str
    fit_id: int
    objective: str
    request: dict[str, Any]
    result: dict[str, Any]


def recommend(session: Session, *, sku: str, body: OptimalPriceRequest) -> Priced:
    """One product's recommendation (not yet stored: see :func:`store`)."""
    product, fit_id, fit = product_with_active_fit(session, sku)
    check_scenario(fit, body.scenario)
    rules = rule_limits.limits_for(
        session,
        rule_limits.product_facts(session, product.id),
        unit_cost=body.unit_cost,
        current_price=current_price(product, fit, body.current_price),
    )
    spread = move_spread_for(session, body.decide_by)
    result = price_product(fit, product, body, rules=rules, move_spread=spread)
    return Priced(
        product_id=product.id,
        sku=product.sku,
        fit_id=fit_id,
        objective=body.objective,
        request=body.model_dump(exclude={"store"}),
        result=price_record.with_prior_price(
            session, product.id, rule_limits.split_binding(result.to_dict(), rules)
        ),
    )


_RECOMMENDATIONS = cast(Table, RecommendationRow.__table__)
_INSERT_RECOMMENDATIONS = insert(_RECOMMENDATIONS).returning(
    _RECOMMENDATIONS.c.id, sort_by_parameter_order=True
)


def store(session: Session, priced: Sequence[Priced]) -> list[dict[str, Any]]:
    """Store worked-out recommendations in one short write transaction.

    Pricing reads and optimises outside the write lock, so concurrent requests do not
    queue behind each other's arithmetic; if a product or fit was deleted in between,
    the request fails as if it had come a moment later.
    """
    now = utcnow()
    try:
        # Core, not the ORM: no objects to track, and no ORM bulk-insert machinery.
        ids = (
            session.connection()
            .scalars(
                _INSERT_RECOMMENDATIONS,
                [
                    {
                        "product_id": p.product_id,
                        "fit_id": p.fit_id,
                        "objective": p.objective,
                        "request": p.request,
                        "result": p.result,
                        "created_at": now,
                    }
                    for p in priced
                ],
            )
            .all()
        )
    except IntegrityError:
        raise NotFound(
            "the product or its fit was deleted while the price was worked out"
        ) from None
    approved = review.after_store(
        session,
        [(row_id, p.product_id, p.sku, p.result) for row_id, p in zip(ids, priced, strict=True)],
    )
    newest = {p.product_id: row_id for row_id, p in zip(ids, priced, strict=True)}
    answers = []
    for row_id, p in zip(ids, priced, strict=True):
        decided = approved.get(row_id)
        state = "proposed" if newest[p.product_id] == row_id else "superseded"
        fields: dict[str, Any] = {"state": state}
        if decided is not None:
            fields = {
                "state": decided.state,
                "decided_at": now if decided.entry is None else decided.entry.created_at,
                "policy_id": None if decided.entry is None else decided.entry.policy_id,
                "approved_price": decided.price,
                "effective_from": None if decided.entry is None else decided.entry.effective_from,
            }
        answers.append(
            answer(p.result, row_id=row_id, sku=p.sku, fit_id=p.fit_id, created_at=now) | fields
        )
    return answers


def store_records(
    session: Session, records: Sequence[dict[str, Any]], skus: dict[int, str]
) -> None:
    """A reprice job's recommendations (rows as :func:`store` writes them), stored like any
    other: each product's older proposed ones are superseded and approval policies apply."""
    if not records:
        return
    ids = session.connection().scalars(_INSERT_RECOMMENDATIONS, list(records)).all()
    review.after_store(
        session,
        [
            (row_id, r["product_id"], skus[r["product_id"]], r["result"])
            for row_id, r in zip(ids, records, strict=True)
        ],
    )


def _check_one_currency(family: str, currencies: dict[str, str]) -> None:
    """A family is priced into one total, which cannot add up different currencies."""
    if len(set(currencies.values())) <= 1:
        return
    named = ", ".join(f"{sku} ({currency})" for sku, currency in sorted(currencies.items()))
    raise InvalidInput(
        f"the products of family {family!r} are priced in more than one currency, so their "
        f"prices cannot be weighed into one total: {named}; give them one currency or "
        "price them one at a time",
        errors=[
            ErrorItem(field=f"family.{sku}", message=f"{sku} is priced in {currency}")
            for sku, currency in sorted(currencies.items())
        ],
    )


def recommend_family(
    session: Session, *, family: str, body: FamilyPriceRequest
) -> tuple[dict[str, Any], list[Priced]]:
    """Joint prices for the products of a family that have an active fit: the answer
    without its stored products, and the recommendations to store (see :func:`store`)."""
    members = list(
        session.scalars(
            select(ProductRow).where(ProductRow.family == family).order_by(ProductRow.sku)
        )
    )
    if not members:
        raise NotFound(f"no products in family {family!r}")
    unknown = sorted(set(body.product_constraints) - {m.sku for m in members})
    unknown += sorted({s for pair in body.order for s in pair} - {m.sku for m in members})
    if unknown:
        raise InvalidInput(
            "rules name products outside the family",
            errors=[
                ErrorItem(field="product_constraints", message=f"{s!r} is not in {family!r}")
                for s in unknown
            ],
        )
    fits: dict[str, DemandFit] = {}
    fit_ids: dict[str, int] = {}
    excluded = []
    for member in members:
        try:
            fit_ids[member.sku], fits[member.sku] = active_fit(session, member)
        except NotFound:
            excluded.append({"sku": member.sku, "reason": "no active fit"})
    if not fits:
        raise Conflict(f"no product of family {family!r} has an active fit to price with")
    by_sku = {m.sku: m for m in members}
    _check_one_currency(family, {sku: by_sku[sku].currency for sku in fits})
    for sku, fit in fits.items():
        shared = {k: v for k, v in body.scenario.items() if not isinstance(v, dict)}
        own = body.scenario.get(sku, {})
        check_scenario(
            fit,
            {k: v for k, v in shared.items() if k in fit.variable_means}
            | (own if isinstance(own, dict) else {}),
            prefix=f"scenario.{sku}",
        )
    order = [(a, b) for a, b in body.order if a in fits and b in fits]
    rules = {
        s: rule_limits.limits_for(
            session,
            rule_limits.ProductFacts(
                by_sku[s].id, s, family, by_sku[s].unit_cost, by_sku[s].current_price
            ),
            current_price=current_price(by_sku[s], fits[s], None),
        )
        for s in fits
    }
    with library_errors(subject="no prices can be recommended from these fits", spec_field="body"):
        result = optimal_family_prices(
            fits,
            objective=body.objective,
            unit_costs={s: by_sku[s].unit_cost for s in fits},
            current_prices={s: current_price(by_sku[s], fits[s], None) for s in fits},
            constraints={
                s: with_rules(
                    price_constraints(by_sku[s], body.product_constraints.get(s, body.constraints)),
                    rules[s],
                )
                for s in fits
            },
            order=order,
            max_total_change_pct=body.max_total_change_pct,
            scenario=body.scenario,
            uncertainty_draws=body.uncertainty_draws,
            seed=body.seed,
            allow_wrong_sign=body.allow_wrong_sign,
            money=money_text(by_sku[next(iter(fits))].currency),  # a family shares one
        )
    rounded = tuple(round_recommendation(r, by_sku[r.sku].currency) for r in result.products)
    data = replace(result, products=rounded).to_dict()
    request = {"family": family, **body.model_dump(exclude={"store"})}
    priced = [
        Priced(
            product_id=by_sku[item["sku"]].id,
            sku=item["sku"],
            fit_id=fit_ids[item["sku"]],
            objective=body.objective,
            request=request,
            result=price_record.with_prior_price(
                session,
                by_sku[item["sku"]].id,
                rule_limits.split_binding(item, rules[item["sku"]]),
            ),
        )
        for item in data["products"]
    ]
    answer = rule_limits.family_answer(
        {k: v for k, v in data.items() if k != "products"}, [p.result for p in priced]
    )
    return {**answer, "family": family, "excluded": excluded}, priced


def answer(
    result: dict[str, Any], *, row_id: int, sku: str, fit_id: int | None, created_at: dt.datetime
) -> dict[str, Any]:
    """A stored recommendation as the API answers it."""
    return {**result, "id": row_id, "sku": sku, "fit_id": fit_id, "created_at": created_at}


def latest_page(
    session: Session,
    *,
    family: str | None,
    since: dt.datetime | None,
    limit: int,
    after_sku: str | None,
    state: str | None = "approved",
) -> tuple[list[tuple[RecommendationRow, str, dt.datetime | None]], bool]:
    """The newest recommendation of each product in ``state`` (None: in any state), by
    sku, with when its price goes live if it was approved."""
    newest = select(func.max(RecommendationRow.id).label("id")).group_by(
        RecommendationRow.product_id
    )
    if state is not None:
        newest = newest.where(RecommendationRow.state == state)
    if since is not None:
        newest = newest.where(RecommendationRow.created_at >= since)
    ids = newest.subquery()
    query = (
        select(RecommendationRow, ProductRow.sku, PriceEntryRow.effective_from)
        .join(ids, ids.c.id == RecommendationRow.id)
        .join(ProductRow, ProductRow.id == RecommendationRow.product_id)
        .outerjoin(
            PriceEntryRow,
            and_(
                PriceEntryRow.recommendation_id == RecommendationRow.id,
                PriceEntryRow.product_id == RecommendationRow.product_id,
            ),
        )
        .order_by(ProductRow.sku)
        .limit(limit + 1)
    )
    if family is not None:
        query = query.where(ProductRow.family == family)
    if after_sku is not None:
        query = query.where(ProductRow.sku > after_sku)
    rows: list[tuple[RecommendationRow, str, dt.datetime | None]] = [
        (r, s, None if e is None else as_utc(e)) for r, s, e in session.execute(query).all()
    ]
    return rows[:limit], len(rows) > limit
