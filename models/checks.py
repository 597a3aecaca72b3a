"""Warning rules for a fitted demand model, each a code plus a sentence.

Thresholds that are rules of thumb say so; none of them stops a fit, they
inform the analyst and the service's quality gates.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Final

import numpy as np

from models._typing import FloatArray
from models.design import Design, Term
from models.engine import DroppedTerm
from models.estimate import Estimate
from models.result import FitWarning

WRONG_SIGN: Final = "wrong_sign"
OWN_PRICE_NOT_SIGNIFICANT: Final = "own_price_not_significant"
FEW_OBSERVATIONS_PER_TERM: Final = "few_observations_per_term"
LOW_PRICE_VARIATION: Final = "low_price_variation"
HIGH_VIF: Final = "high_vif"
STOCKOUTS_EXCLUDED: Final = "stockouts_excluded"
ZERO_UNITS_DROPPED: Final = "zero_units_dropped"
MISSING_VALUES_DROPPED: Final = "missing_values_dropped"
TERMS_DROPPED: Final = "terms_dropped"
WEAK_INSTRUMENT: Final = "weak_instrument"
NEAR_COLLINEAR: Final = "near_collinear"
WINDOW_EXCLUDED: Final = "window_excluded"

WARNING_CODES: Final = (
    WRONG_SIGN,
    OWN_PRICE_NOT_SIGNIFICANT,
    FEW_OBSERVATIONS_PER_TERM,
    LOW_PRICE_VARIATION,
    HIGH_VIF,
    STOCKOUTS_EXCLUDED,
    ZERO_UNITS_DROPPED,
    MISSING_VALUES_DROPPED,
    TERMS_DROPPED,
    WEAK_INSTRUMENT,
    NEAR_COLLINEAR,
    WINDOW_EXCLUDED,
)

SIGNIFICANCE: Final = 0.05
"""Level below which a p-value counts as significant (own price, diagnostic tests)."""
MIN_OBS_PER_TERM: Final = 10  # common practice, no source
MIN_PRICE_CV: Final = 0.02  # rule of thumb (ours): below a 2% coefficient of variation
VIF_LIMIT: Final = 10.0  # common practice (often attributed to Marquardt 1970)
"""Variance inflation factor above which a term is flagged as collinear with others."""
NEAR_COLLINEAR_CONDITION: Final = 1e7  # rule of thumb (ours): about log10(k) digits lost
"""Scaled condition number above which a full-rank design is called nearly collinear.

Rounding in the data can move the estimates by about the condition number times the
relative rounding; above 1e7 fewer than nine of double precision's sixteen digits are safe.
"""
WEAK_INSTRUMENT_F: Final = 10.0  # Staiger & Stock (1997) rule of thumb
"""First-stage F below which the instruments of a two-stage fit count as weak."""


def price_variation(price: FloatArray) -> float:
    """Coefficient of variation of the own price (0 when its mean is not positive)."""
    mean = np.mean(price)
    return float(np.std(price) / mean) if mean > 0 else 0.0


def fit_warnings(
    design: Design, estimate: Estimate, dropped: Sequence[DroppedTerm] = ()
) -> tuple[FitWarning, ...]:
    """All warnings that apply to a fit of ``design``."""
    own = [t.kind for t in design.terms].index("own_price")
    return warnings_from_figures(
        form=design.form,
        terms=design.terms,
        own_coef=float(estimate.params[own]),
        own_p_value=float(estimate.pvalues()[own]),
        n_obs=design.n_usable,
        price_cv=price_variation(design.variables["price"][design.usable]),
        vifs=estimate.vif.tolist(),
        n_stockouts=design.n_stockouts,
        n_window=design.n_window,
        n_zero_dropped=design.n_zero_dropped,
        n_missing=design.n_missing,
        dropped=dropped,
        first_stage_f=estimate.first_stage_f,
        condition_number=estimate.condition_number,
        n_window_excluded=design.n_window_excluded,
        window_excluded_from=design.window_excluded_from,
    )


def warnings_from_figures(
    *,
    form: str,
    terms: Sequence[Term],
    own_coef: float,
    own_p_value: float,
    n_obs: int,
    price_cv: float,
    vifs: Sequence[float],
    n_stockouts: int,
    n_window: int,
    n_zero_dropped: int,
    n_missing: int,
    dropped: Sequence[DroppedTerm] = (),
    first_stage_f: float | None = None,
    condition_number: float | None = None,
    n_window_excluded: int = 0,
    window_excluded_from: str | None = None,
) -> tuple[FitWarning, ...]:
    """The warnings of a fit, from its figures (``vifs`` in term order, NaN where none)."""
    found: list[FitWarning] = []
    if own_coef > 0.0:
        found.append(
            FitWarning(
                WRONG_SIGN,
                f"Wrong sign: the own-price coefficient is positive ({own_coef:.3g}), so demand "
                "appears to rise with price, which usually signals a missing driver or price "
                "endogeneity.",
            )
        )
    if not own_p_value < SIGNIFICANCE:
        found.append(
            FitWarning(
                OWN_PRICE_NOT_SIGNIFICANT,
                f"The own-price effect is not significant at 5% (p = {own_p_value:.3g})."
                if math.isfinite(own_p_value)
                else "The own-price effect cannot be told from zero: the fitted periods leave "
                "no residual variation to judge it by.",
            )
        )
    n_terms = len(terms)
    if n_obs < MIN_OBS_PER_TERM * n_terms:
        found.append(
            FitWarning(
                FEW_OBSERVATIONS_PER_TERM,
                f"{n_obs} observations for {n_terms} terms, "
                f"fewer than {MIN_OBS_PER_TERM} per term.",
            )
        )
    if price_cv < MIN_PRICE_CV:
        found.append(
            FitWarning(
                LOW_PRICE_VARIATION,
                f"The price varied little (coefficient of variation {price_cv:.2%}), so its "
                "effect is poorly determined.",
            )
        )
    high = [
        f"{t.name} ({v:.1f})"
        for t, v in zip(terms, vifs, strict=True)
        if math.isfinite(v) and v > VIF_LIMIT
    ]
    if high:
        found.append(
            FitWarning(
                HIGH_VIF, f"Variance inflation factor above {VIF_LIMIT:g}: {', '.join(high)}."
            )
        )
    if n_stockouts:
        share = n_stockouts / n_window
        found.append(
            FitWarning(
                STOCKOUTS_EXCLUDED,
                f"{n_stockouts} out-of-stock periods ({share:.0%} of the window) were "
                "excluded because their sales understate demand.",
            )
        )
    if n_zero_dropped:
        found.append(
            FitWarning(
                ZERO_UNITS_DROPPED,
                f"{n_zero_dropped} zero-unit periods were dropped because the {form} "
                "form takes the log of units; the poisson form keeps them.",
            )
        )
    if n_missing:
        found.append(
            FitWarning(
                MISSING_VALUES_DROPPED,
                f"{n_missing} periods were left out because a value the model needs is missing.",
            )
        )
    if dropped:
        found.append(FitWarning(TERMS_DROPPED, dropped_terms_text(dropped)))
    if (
        not dropped
        and condition_number is not None
        and math.isfinite(condition_number)
        and condition_number > NEAR_COLLINEAR_CONDITION
    ):
        found.append(
            FitWarning(
                NEAR_COLLINEAR,
                f"The terms are nearly collinear (scaled condition number {condition_number:.3g}, "
                f"above {NEAR_COLLINEAR_CONDITION:.0e}): the model was fitted as given, but "
                "small changes in the data can move the estimates a lot.",
            )
        )
    if n_window_excluded:
        found.append(
            FitWarning(
                WINDOW_EXCLUDED,
                f"{n_window_excluded} older periods (from {window_excluded_from}) lie outside "
                f"the window of the {n_window} most recent periods and were not used; "
                "raise window_periods to fit on them.",
            )
        )
    if first_stage_f is not None and first_stage_f < WEAK_INSTRUMENT_F:
        found.append(
            FitWarning(
                WEAK_INSTRUMENT,
                f"First-stage F is {first_stage_f:.3g}, below {WEAK_INSTRUMENT_F:g}: the "
                "instruments are weak and the corrected price effect is unreliable.",
            )
        )
    return tuple(found)


def dropped_terms_text(dropped: Sequence[DroppedTerm]) -> str:
    """Why each dropped term was left out: it never varies, or which terms it combines."""
    reasons = []
    for item in dropped:
        if item.partners:
            reasons.append(
                f"{item.term.name} is a linear combination of {', '.join(item.partners)}"
            )
        else:
            reasons.append(f"{item.term.name} never varies")
    return (
        "Terms dropped, since the fitted periods cannot separate them: " + "; ".join(reasons) + "."
    )


def equation_text(form: str, terms: Sequence[Term], params: Sequence[float]) -> str:
    """The fitted equation with signs kept, e.g. ``ln(units) = 3.2 - 1.8 ln(price) + 0.4 promo``."""
    parts = [f"{params[0]:.4g}"]
    for term, value in zip(terms[1:], params[1:], strict=True):
        if math.isfinite(value):
            parts.append(f"{'-' if value < 0 else '+'} {abs(value):.4g} {term.name}")
    body = " ".join(parts)
    if form == "linear":
        return f"units = {body}"
    if form == "poisson":
        return f"E[units] = exp({body})"
    return f"ln(units) = {body}"
