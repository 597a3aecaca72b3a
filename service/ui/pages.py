"""What each page shows, assembled from records and `models` (templates only lay it out)."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from sqlalchemy.orm import Session

import models
from models import DemandFit
from service.estimation import outcomes
from service.ui import chartbook, chartdata, records, words
from service.ui.chartdata import KINDS
from service.ui.records import ProductInfo, Recommendation, ShownFit
from service.ui.words import Badge

if TYPE_CHECKING:
    from service.ui.charts import Chart

PAGE_SIZE = 100


@dataclass(frozen=True)
class Elasticity:
    value: float
    ci_low: float
    ci_high: float
    label: str


@dataclass(frozen=True)
class CatalogueRow:
    product: ProductInfo
    fit_state: str  # active, rejected, none
    fit_version: int | None
    form: str | None
    elasticity: Elasticity | None
    r_squared: float | None
    holdout_wape: float | None
    n_obs: int | None
    badges: tuple[Badge, ...]
    current_price: float | None
    recommended_price: float | None
    change_pct: float | None
    profit_change: float | None
    profit_change_pct: float | None
    recommendation_stale: bool
    held_by: str | None  # short names of the constraints holding the price, or "none"
    held_by_detail: str | None  # the same as a sentence
    period: str  # the word for one period of the fitted history: week, month, ... or period


def fit_period(fit: DemandFit | None) -> str:
    """The word for one period of the history a fit used (``period`` when unknown)."""
    if fit is None:
        return "period"
    w = fit.window
    return words.period_word(w.first_period, w.last_period, w.n_window)


def _held_by(result: dict[str, Any]) -> tuple[str, str]:
    binding = [str(b) for b in result.get("binding_constraints") or []]
    optimum = result.get("optimum")
    label = words.held_by(str(optimum) if optimum else None, binding)
    if binding:
        return label, "The price is held by " + words.rules_words(binding) + "."
    if optimum == "no_finite_optimum":
        return label, "The objective keeps improving toward a limit, so the price sits on it."
    return label, "No constraint holds the price: it is the objective's own best price."


def own_elasticity(fit: DemandFit) -> Elasticity | None:
    """Own-price elasticity at the fitted periods' means, with its 95% interval and class."""
    try:
        row = models.elasticities(fit, at="mean").own
    except ValueError:
        return None
    if not math.isfinite(row.value):
        return None
    return Elasticity(
        row.value,
        row.ci_low,
        row.ci_high,
        words.elasticity_class_words(row.value, row.classification),
    )


def _number(value: Any) -> float | None:
    return float(value) if isinstance(value, (int, float)) and math.isfinite(value) else None


def catalogue_row(
    product: ProductInfo,
    shown: ShownFit | None,
    recommendation: Recommendation | None,
    drifting: bool = False,
) -> CatalogueRow:
    badges: list[Badge] = []
    if drifting:
        badges.append(words.DRIFT_BADGE)
    if shown is None:
        badges.append(
            Badge("no_fit", "not fitted", "No demand model has been fitted yet.", "caution")
        )
    elif not shown.active:
        failed = records.failed_gates(shown.gates)
        badges.append(
            Badge(
                "rejected",
                "rejected fit",
                "The latest fit failed the quality gates ("
                + ", ".join(words.gate_words(g) for g in failed)
                + "); no price is recommended.",
                "caution",
            )
        )
    period = fit_period(shown.fit if shown is not None else None)
    if shown is not None:
        badges += [words.fit_badge(w.code, w.message, period) for w in shown.fit.warnings]
    current = recommended = change = gain = gain_pct = None
    held: tuple[str, str] | tuple[None, None] = (None, None)
    stale = False
    if shown is not None and shown.active and recommendation is not None:
        result = recommendation.result
        now = result.get("current") or {}
        best = result.get("recommended") or {}
        current, recommended = _number(now.get("price")), _number(best.get("price"))
        change = _number(result.get("change_pct"))
        before, after = _number(now.get("profit")), _number(best.get("profit"))
        if before is not None and after is not None:
            gain = after - before
            gain_pct = 100.0 * gain / abs(before) if before else None
        stale = recommendation.fit_id != shown.id
        held = _held_by(result)
        badges += [
            words.pricing_badge(str(w.get("code")), str(w.get("message")))
            for w in result.get("warnings") or []
        ]
    if current is None:
        current = product.current_price
    fit = shown.fit if shown is not None else None
    return CatalogueRow(
        product=product,
        fit_state="none" if shown is None else shown.status,
        fit_version=shown.version if shown is not None else None,
        form=fit.form if fit is not None else None,
        elasticity=own_elasticity(fit) if fit is not None else None,
        r_squared=fit.quality.r_squared if fit is not None else None,
        holdout_wape=fit.quality.holdout_wape if fit is not None else None,
        n_obs=fit.quality.n_obs if fit is not None else None,
        badges=tuple(badges),
        current_price=current,
        recommended_price=recommended,
        change_pct=change,
        profit_change=gain,
        profit_change_pct=gain_pct,
        recommendation_stale=stale,
        held_by=held[0],
        held_by_detail=held[1],
        period=period,
    )


SORT_KEYS: dict[str, tuple[str, Callable[[CatalogueRow], Any]]] = {
    "sku": ("Product", lambda r: r.product.sku),
    "family": ("Family", lambda r: r.product.family or ""),
    "elasticity": ("Own-price elasticity", lambda r: r.elasticity.value if r.elasticity else None),
    "r_squared": ("R²", lambda r: r.r_squared),
    "holdout_wape": ("Hold-out WAPE", lambda r: r.holdout_wape),
    "warnings": ("Warnings", lambda r: len(r.badges)),
    "current_price": ("Current price", lambda r: r.current_price),
    "recommended_price": ("Recommended", lambda r: r.recommended_price),
    "change_pct": ("Change", lambda r: r.change_pct),
    "held_by": ("Held by", lambda r: r.held_by),
    "profit_change": ("Expected profit change", lambda r: r.profit_change),
}


def sort_rows(rows: list[CatalogueRow], key: str, descending: bool) -> list[CatalogueRow]:
    """Sorted by one column; rows without a value always come last."""
    pick = SORT_KEYS.get(key, SORT_KEYS["sku"])[1]
    present = [r for r in rows if pick(r) is not None]
    absent = [r for r in rows if pick(r) is None]
    present.sort(key=lambda r: (pick(r), r.product.sku), reverse=descending)
    return present + absent


@dataclass(frozen=True)
class Catalogue:
    rows: list[CatalogueRow]
    families: list[str]
    family: str | None
    sort: str
    descending: bool
    page: int
    pages: int
    total: int
    period: str  # the rows' common period word, else "period"


def catalogue(
    session: Session,
    *,
    family: str | None = None,
    sort: str = "sku",
    descending: bool = False,
    page: int = 1,
    page_size: int | None = PAGE_SIZE,
) -> Catalogue:
    """The catalogue table; ``page_size=None`` puts every row on one page (static report)."""
    known = records.families(session)
    chosen = family if family in known else None
    items = records.catalogue(session, chosen)
    ids = [p.id for p in items]
    fits = records.shown_fits(session, ids)
    recommendations = records.latest_recommendations(session, ids)
    drift = outcomes.drifting(session, [p.id for p in items if p.id in recommendations])
    rows = [
        catalogue_row(p, fits.get(p.id), recommendations.get(p.id), drift.get(p.id, False))
        for p in items
    ]
    sort = sort if sort in SORT_KEYS else "sku"
    rows = sort_rows(rows, sort, descending)
    size = page_size or max(len(rows), 1)
    pages = max(1, math.ceil(len(rows) / size))
    page = min(max(page, 1), pages)
    return Catalogue(
        rows=rows[(page - 1) * size : page * size],
        families=known,
        family=chosen,
        sort=sort,
        descending=descending,
        page=page,
        pages=pages,
        total=len(rows),
        period=_common_period(rows),
    )


def _common_period(rows: list[CatalogueRow]) -> str:
    found = {r.period for r in rows if r.fit_state != "none"}
    return found.pop() if len(found) == 1 else "period"


@dataclass(frozen=True)
class ChartView:
    kind: str
    heading: str
    title: str
    summary: tuple[str, ...]
    reading: str


CHART_HEADINGS = {
    "demand": "Demand",
    "money": "Revenue and profit",
    "fit-over-time": "Fit over time",
}

# How to read a chart, a sentence per mark: a caption names only the marks its chart
# draws (the ids are the charts' own, see service.ui.charts_*.*_marks).
READINGS: dict[str, tuple[tuple[tuple[str, ...], str], ...]] = {
    "demand": (
        (("weeks-",), "Each point is a past {period}."),
        (
            ("demand-curve",),
            "The solid line is the expected demand at the stated values of the other drivers.",
        ),
        (
            ("demand-band",),
            "The shaded band is the range one {period}'s units fall in 95 times in 100.",
        ),
        (
            ("demand-curve-below-range", "demand-curve-above-range"),
            "Dashed parts lie beyond the prices the fit has seen.",
        ),
        (("observed-range",), "The dotted background spans the prices the fit has seen."),
        (("current-price",), "The dotted vertical line is the current price."),
        (("recommended-price",), "The dash-dotted vertical line is the recommended price."),
    ),
    "money": (
        (("profit-curve",), "Both curves come from the fitted demand."),
        (("revenue-curve",), "Revenue comes from the fitted demand."),
        (("feasible-band",), "The hatched band holds the prices the constraints allow."),
        (("best-price",), "The star is the best price under the constraints."),
        (
            ("price-interval",),
            "The bar under it is the range that best price takes when the "
            "coefficients are redrawn within their uncertainty.",
        ),
        (("current-price",), "The dotted vertical line is the current price."),
        (("unconstrained-price",), "A grey line marks the best price with no constraints."),
        (
            ("stored-recommendation",),
            "A thin dotted line marks the stored recommendation, made from another fit.",
        ),
    ),
    "fit-over-time": (
        (("actual-units",), "The solid line is the actual units per {period}."),
        (("fitted-units",), "The dashed line is the model's fitted units."),
        (("residuals",), "The bars below are the misses of the {period}s in the fit."),
        (("holdout-window",), "The shaded {period}s at the end are the hold-out."),
        (
            ("holdout-forecast",),
            "Over them the dash-dotted line is the forecast of a separate "
            "fit made without them: what the hold-out WAPE scores.",
        ),
    ),
}


def chart_reading(marks: tuple[str, ...], note: str | None, kind: str, period: str) -> str:
    """The caption under a chart: how to read the marks it draws, or why it draws none."""
    if marks == ("placeholder",):
        return f"No chart is drawn: {note or 'there is nothing to show yet.'}"
    sentences = []
    for names, sentence in READINGS[kind]:
        if kind == "money" and names == ("revenue-curve",) and "profit-curve" in marks:
            continue  # "both curves" already says it
        if any(m == n or (n.endswith("-") and m.startswith(n)) for m in marks for n in names):
            sentences.append(sentence.format(period=period))
    return " ".join(sentences)


@dataclass(frozen=True)
class ProductPage:
    product: ProductInfo
    shown: ShownFit | None
    row: CatalogueRow
    equation: str | None
    coefficients: list[Any]
    quality: Any
    diagnostics: list[words.Reading]
    warnings: list[Badge]
    gates: list[dict[str, Any]]
    elasticities: list[Any]
    candidate_scores: dict[str, float | None]
    window: Any
    versions: list[records.FitVersion]
    recommendations: list[Recommendation]
    latest: Recommendation | None
    charts: list[ChartView]
    fit_versions: dict[int, int]  # a fit's id -> its version, as people refer to fits
    prices: records.PriceRecordView


def chart_views(
    subject: chartdata.Subject, drawn: dict[str, Chart] | None = None
) -> list[ChartView]:
    views = []
    for kind in KINDS:
        told = chartbook.outline(subject, kind)
        title, summary = (
            (told.title, told.summary)
            if drawn is None
            else (drawn[kind].title, drawn[kind].summary)
        )
        heading = CHART_HEADINGS[kind]
        period = fit_period(subject.fit.fit if subject.fit else None)
        reading = chart_reading(told.marks, told.note, kind, period)
        views.append(ChartView(kind, heading, title, summary, reading))
    return views


def product_page(
    session: Session, sku: str, *, drawn: dict[str, Chart] | None = None
) -> ProductPage:
    product = records.product(session, sku)
    subject = chartbook.subject(session, product)
    return product_page_for(session, subject, drawn=drawn)


def product_page_for(
    session: Session, subject: chartdata.Subject, *, drawn: dict[str, Chart] | None = None
) -> ProductPage:
    product, shown, latest = subject.product, subject.fit, subject.recommendation
    fit = shown.fit if shown is not None else None
    elasticity_rows: list[Any] = []
    if fit is not None:
        try:
            elasticity_rows = list(models.elasticities(fit, at="mean").rows)
        except ValueError:
            elasticity_rows = []
    versions = records.fit_versions(session, product.id)
    return ProductPage(
        product=product,
        shown=shown,
        row=catalogue_row(product, shown, latest),
        equation=fit.equation if fit is not None else None,
        coefficients=list(fit.coefficients) if fit is not None else [],
        quality=fit.quality if fit is not None else None,
        diagnostics=words.diagnostics(vars(fit.diagnostics), fit.spec.standard_errors)
        if fit is not None
        else [],
        warnings=[words.fit_badge(w.code, w.message, fit_period(fit)) for w in fit.warnings]
        if fit is not None
        else [],
        gates=list((shown.gates or {}).get("checks") or []) if shown is not None else [],
        elasticities=elasticity_rows,
        candidate_scores=dict(fit.candidate_scores) if fit is not None else {},
        window=fit.window if fit is not None else None,
        versions=versions,
        recommendations=records.recommendations(session, product.id),
        latest=latest,
        charts=chart_views(subject, drawn),
        fit_versions={v.id: v.version for v in versions},
        prices=records.price_record_view(session, product.id, product.sku),
    )
