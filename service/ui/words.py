"""Plain words for codes and figures: warning badges, rules, diagnostics.

Thresholds that are rules of thumb say so where they are shown.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

from models import SIGNIFICANCE, VIF_LIMIT, WEAK_INSTRUMENT_F


@dataclass(frozen=True)
class Badge:
    """A short label with the full sentence behind it; ``level`` is caution or note."""

    code: str
    label: str
    detail: str
    level: str


DRIFT_BADGE = Badge(
    "drift",
    "outcomes drifting",
    "Since the recommendation, units sold fell outside the fit's 95% prediction intervals "
    "more often than they should: demand may have changed. A refit is suggested; the "
    "product's outcomes (GET /v1/products/{sku}/outcomes) show each period.",
    "caution",
)

# Fit warnings that question the price effect itself are cautions; the rest are notes.
_FIT_WARNINGS = {
    "wrong_sign": ("price effect has the wrong sign", "caution"),
    "own_price_not_significant": ("price effect unclear", "caution"),
    "few_observations_per_term": ("few {periods} per term", "caution"),
    "low_price_variation": ("price barely varied", "caution"),
    "high_vif": ("drivers overlap", "note"),
    "stockouts_excluded": ("stockout {periods} left out", "note"),
    "zero_units_dropped": ("zero-sale {periods} dropped", "note"),
    "missing_values_dropped": ("incomplete {periods} dropped", "note"),
    "terms_dropped": ("terms dropped", "note"),
    "weak_instrument": ("weak instrument", "caution"),
    "near_collinear": ("drivers nearly duplicate each other", "caution"),
    "window_excluded": ("older {periods} outside the window", "note"),
}

_PRICING_WARNINGS = {
    "price_outside_observed_range": ("beyond prices seen", "caution"),
    "objective_unbounded_above": ("set by an upper limit", "note"),
    "objective_unbounded_below": ("set by a lower limit", "note"),
    "cost_above_feasible_prices": ("cost above allowed prices", "caution"),
    "wrong_sign_allowed": ("priced despite the wrong sign", "caution"),
    "no_expected_demand": ("no demand at this price", "caution"),
    "wrong_sign_draws": ("some draws have the wrong sign", "note"),
    "uncertainty_unavailable": ("no uncertainty figures", "note"),
    "current_figures_unavailable": ("no current figures", "note"),
}


def fit_badge(code: str, message: str, period: str = "period") -> Badge:
    """A fit warning's badge; ``period`` is the word for one period of the history."""
    label, level = _FIT_WARNINGS.get(code, (code.replace("_", " "), "note"))
    return Badge(code, label.replace("{periods}", period + "s"), message, level)


def pricing_badge(code: str, message: str) -> Badge:
    label, level = _PRICING_WARNINGS.get(code, (code.replace("_", " "), "note"))
    return Badge(code, label, message, level)


# Quality gates as a sentence names them, and as a table cell does.
_GATES = {
    "wrong_sign": ("the price effect must not have the wrong sign", "no wrong sign"),
    "price_variation": ("the price must have varied enough", "price varied enough"),
    "enough_observations": ("enough periods of history", "enough periods"),
    "holdout_not_worse": (
        "hold-out error no worse than the active fit's",
        "hold-out error no worse",
    ),
}


def gate_words(name: str) -> str:
    return _GATES.get(name, (name.replace("_", " "),))[0]


def gate_label(name: str) -> str:
    """The short name of a quality gate, for a table cell."""
    return _GATES.get(name, (name, name.replace("_", " ")))[1]


# Constraints as a sentence names them, and as a table cell does (docs/glossary.md).
_CONSTRAINTS = {
    "min_price": ("the lowest allowed price", "lowest price"),
    "max_price": ("the highest allowed price", "highest price"),
    "max_change_pct": ("the change cap (the largest allowed change)", "change cap"),
    "min_margin_pct": ("the margin floor", "margin floor"),
    "price_step": ("the price step", "price step"),
    "price_endings": ("the allowed price endings", "price endings"),
    "max_units": ("the stock limit", "stock limit"),
    "min_units": ("the volume floor", "volume floor"),
    "observed_price_range": ("the guard against prices far from those seen", "prices seen"),
    "order": ("the order between products", "order"),
    "max_total_change_pct": ("the family's index cap", "family index cap"),
    "no_harm_check": (
        "the do-no-harm check (moving did not win clearly enough)",
        "do-no-harm check",
    ),
    "catalogue_calibration": (
        "the catalogue calibration (the catalogue supports only part of the move)",
        "catalogue calibration",
    ),
}


def _constraint(name: str) -> tuple[str, str]:
    """Plain words for a binding constraint's code, also ``order:A<=B`` and ``SKU.code``."""
    if name.startswith("order:"):
        pair = name[len("order:") :].replace("<=", " at most ")
        return f"the order between products ({pair})", f"order ({pair})"
    sku, dot, code = name.rpartition(".")
    if dot and code in _CONSTRAINTS:
        long, short = _CONSTRAINTS[code]
        return f"{long} of {sku}", f"{short} of {sku}"
    plain = name.replace("_", " ")
    return _CONSTRAINTS.get(name, (plain, plain))


def rule_words(name: str) -> str:
    return _constraint(name)[0]


def rules_words(names: tuple[str, ...] | list[str]) -> str:
    return ", ".join(rule_words(n) for n in names)


def constraint_label(name: str) -> str:
    """The short name of a binding constraint, for a table cell."""
    return _constraint(name)[1]


def held_by(optimum: str | None, binding: list[str] | tuple[str, ...]) -> str:
    """What holds a recommended price: its constraints' short names, or "none"."""
    names = ", ".join(dict.fromkeys(constraint_label(n) for n in binding))
    if names:
        return names
    if optimum == "no_finite_optimum":
        return "a limit (no peak)"
    return "none"


def elasticity_class_words(value: float, classification: str | None) -> str:
    """The class in words, as the API gives it (which weighs the 95% interval too)."""
    if classification is None and value >= 0:
        return "wrong sign"
    return (classification or "not classified").replace("_", " ")


@dataclass(frozen=True)
class Reading:
    """A diagnostic figure and what it says."""

    name: str
    value: str
    meaning: str


def _fmt(value: float | None, digits: int = 3) -> str:
    if value is None or not math.isfinite(value):
        return "n/a"
    return f"{value:.{digits}g}"


def diagnostics(figures: dict[str, float | None], standard_errors: str) -> list[Reading]:
    """Each stored diagnostic with a sentence; figures that are missing are left out."""
    readings = []
    robust = standard_errors in ("hc0", "hc1", "hc2", "hc3", "hac")
    dw = figures.get("durbin_watson")
    if dw is not None:
        # Rule of thumb (common practice, no source): 1.5 to 2.5 shows no worrying pattern.
        if 1.5 <= dw <= 2.5:
            meaning = "close to 2: no sign that one week's surprise carries into the next."
        elif dw < 1.5:
            meaning = "below 1.5: surprises tend to carry into the following weeks; " + (
                "the chosen Newey-West standard errors allow for that."
                if standard_errors == "hac"
                else "intervals may be too narrow; consider Newey-West (hac) standard errors "
                "in the spec."
            )
        else:
            meaning = "above 2.5: surprises tend to flip sign from week to week."
        readings.append(Reading("Durbin-Watson", _fmt(dw), meaning))
    bp = figures.get("breusch_pagan_p")
    if bp is not None:
        if bp < SIGNIFICANCE:
            meaning = "the spread of the errors changes with the drivers; " + (
                "the robust standard errors in use allow for that."
                if robust
                else "classical standard errors may mislead; consider robust (hc3) standard "
                "errors in the spec."
            )
        else:
            meaning = "no evidence that the spread of the errors changes with the drivers."
        readings.append(Reading("Breusch-Pagan p-value", _fmt(bp), meaning))
    jb = figures.get("jarque_bera_p")
    if jb is not None:
        meaning = (
            "the errors are not normally shaped: week-level ranges may be off in the tails."
            if jb < SIGNIFICANCE
            else "no evidence against normally shaped errors."
        )
        readings.append(Reading("Jarque-Bera p-value", _fmt(jb), meaning))
    cond = figures.get("condition_number")
    if cond is not None:
        readings.append(
            Reading(
                "Condition number",
                _fmt(cond),
                "how close the drivers come to duplicating each other (larger is closer); "
                f"the VIF column shows which terms are involved (above {VIF_LIMIT:g} is high, "
                "common practice).",
            )
        )
    first = figures.get("first_stage_f")
    if first is not None:
        readings.append(
            Reading(
                "First-stage F",
                _fmt(first),
                (
                    f"below {WEAK_INSTRUMENT_F:g}: the instrument barely moves the price "
                    "(weak), so the instrumented estimate is unreliable (Staiger and Stock rule "
                    "of thumb)."
                )
                if first < WEAK_INSTRUMENT_F
                else "the instrument moves the price clearly enough.",
            )
        )
    endo = figures.get("endogeneity_p")
    if endo is not None:
        readings.append(
            Reading(
                "Endogeneity test p-value",
                _fmt(endo),
                "the price responds to demand itself; prefer the instrumented estimate."
                if endo < SIGNIFICANCE
                else "no evidence that the price responds to demand itself.",
            )
        )
    return readings


# Spacing of periods in days -> the word for one period (a history's detected period).
_PERIOD_WORDS = (
    (0.8, 1.5, "day"),
    (6.0, 8.0, "week"),
    (27.0, 32.0, "month"),
    (88.0, 93.0, "quarter"),
    (360.0, 370.0, "year"),
)


def period_word(first: str | None, last: str | None, count: int) -> str:
    """The word for one period of a history: day, week, month, quarter, year or period."""
    if not first or not last or count < 2:
        return "period"
    try:
        days = (dt.date.fromisoformat(last[:10]) - dt.date.fromisoformat(first[:10])).days
    except ValueError:
        return "period"
    spacing = days / (count - 1)
    return next((w for low, high, w in _PERIOD_WORDS if low <= spacing <= high), "period")


def plural(count: int, word: str, many: str | None = None) -> str:
    """``1 week``, ``8 weeks``, ``0 weeks``."""
    return f"{count:,} {word if count == 1 else (many or word + 's')}"
