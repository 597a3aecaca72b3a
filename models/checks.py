"""Warning rules for a fitted demand model, each a code plus a sentence.

Thresholds that are rules of thumb say so; none of them stops a fit, they
inform the analyst and the service's quality gates.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Final

import numpy as np

from models.design import Design, Term
from models.estimate import Estimate
from models.result import FitWarning

OWN_PRICE_POSITIVE: Final = "own_price_positive"
OWN_PRICE_NOT_SIGNIFICANT: Final = "own_price_not_significant"
FEW_OBSERVATIONS_PER_TERM: Final = "few_observations_per_term"
LOW_PRICE_VARIATION: Final = "low_price_variation"
HIGH_VIF: Final = "high_vif"
STOCKOUTS_EXCLUDED: Final = "stockouts_excluded"
ZERO_UNITS_DROPPED: Final = "zero_units_dropped"
MISSING_VALUES_DROPPED: Final = "missing_values_dropped"
TERMS_DROPPED: Final = "terms_dropped"
WEAK_INSTRUMENT: Final = "weak_instrument"

WARNING_CODES: Final = (
    OWN_PRICE_POSITIVE,
    OWN_PRICE_NOT_SIGNIFICANT,
    FEW_OBSERVATIONS_PER_TERM,
    LOW_PRICE_VARIATION,
    HIGH_VIF,
    STOCKOUTS_EXCLUDED,
    ZERO_UNITS_DROPPED,
    MISSING_VALUES_DROPPED,
    TERMS_DROPPED,
    WEAK_INSTRUMENT,
)

SIGNIFICANCE: Final = 0.05
MIN_OBS_PER_TERM: Final = 10  # common practice, no source
MIN_PRICE_CV: Final = 0.02  # rule of thumb (ours): below a 2% coefficient of variation
VIF_LIMIT: Final = 10.0  # common practice (often attributed to Marquardt 1970)
WEAK_INSTRUMENT_F: Final = 10.0  # Staiger & Stock (1997) rule of thumb


def fit_warnings(
    design: Design, estimate: Estimate, dropped: Sequence[Term] = ()
) -> tuple[FitWarning, ...]:
    """All warnings that apply to a fit of ``design``."""
    found: list[FitWarning] = []
    own = [t.kind for t in design.terms].index("own_price")
    coef = float(estimate.params[own])
    p_value = float(estimate.pvalues()[own])
    if coef > 0.0:
        found.append(
            FitWarning(
                OWN_PRICE_POSITIVE,
                f"The own-price coefficient is positive ({coef:.3g}): demand appears to rise with "
                "price, which usually signals a missing driver or price endogeneity.",
            )
        )
    if not p_value < SIGNIFICANCE:
        found.append(
            FitWarning(
                OWN_PRICE_NOT_SIGNIFICANT,
                f"The own-price effect is not significant at 5% (p = {p_value:.3g}).",
            )
        )
    n_obs, n_terms = design.n_usable, len(design.terms)
    if n_obs < MIN_OBS_PER_TERM * n_terms:
        found.append(
            FitWarning(
                FEW_OBSERVATIONS_PER_TERM,
                f"{n_obs} observations for {n_terms} terms, "
                f"fewer than {MIN_OBS_PER_TERM} per term.",
            )
        )
    price = design.variables["price"][design.usable]
    variation = float(np.std(price) / np.mean(price)) if np.mean(price) > 0 else 0.0
    if variation < MIN_PRICE_CV:
        found.append(
            FitWarning(
                LOW_PRICE_VARIATION,
                f"The price varied little (coefficient of variation {variation:.2%}), so its "
                "effect is poorly determined.",
            )
        )
    high = [
        f"{t.name} ({v:.1f})"
        for t, v in zip(design.terms, estimate.vif, strict=True)
        if np.isfinite(v) and v > VIF_LIMIT
    ]
    if high:
        found.append(
            FitWarning(
                HIGH_VIF, f"Variance inflation factor above {VIF_LIMIT:g}: {', '.join(high)}."
            )
        )
    if design.n_stockouts:
        share = design.n_stockouts / design.n_window
        found.append(
            FitWarning(
                STOCKOUTS_EXCLUDED,
                f"{design.n_stockouts} out-of-stock periods ({share:.0%} of the window) were "
                "excluded because their sales understate demand.",
            )
        )
    if design.n_zero_dropped:
        found.append(
            FitWarning(
                ZERO_UNITS_DROPPED,
                f"{design.n_zero_dropped} zero-unit periods were dropped because the {design.form} "
                "form takes the log of units; the poisson form keeps them.",
            )
        )
    if design.n_missing:
        found.append(
            FitWarning(
                MISSING_VALUES_DROPPED,
                f"{design.n_missing} periods were left out because a value the model needs "
                "is missing.",
            )
        )
    if dropped:
        names = ", ".join(t.name for t in dropped)
        found.append(
            FitWarning(
                TERMS_DROPPED,
                "Dropped because they never vary or duplicate other terms in this window: "
                f"{names}.",
            )
        )
    if estimate.first_stage_f is not None and estimate.first_stage_f < WEAK_INSTRUMENT_F:
        found.append(
            FitWarning(
                WEAK_INSTRUMENT,
                f"First-stage F is {estimate.first_stage_f:.3g}, below {WEAK_INSTRUMENT_F:g}: the "
                "instruments are weak and the corrected price effect is unreliable.",
            )
        )
    return tuple(found)


def equation_text(form: str, terms: Sequence[Term], params: Sequence[float]) -> str:
    """The fitted equation with signs kept, e.g. ``ln(units) = 3.2 - 1.8 ln(price) + 0.4 promo``."""
    body = f"{params[0]:.4g}"
    for term, value in zip(terms[1:], params[1:], strict=True):
        if not np.isfinite(value):
            continue
        sign = "-" if value < 0 else "+"
        body += f" {sign} {abs(value):.4g} {term.name}"
    if form == "linear":
        return f"units = {body}"
    if form == "poisson":
        return f"E[units] = exp({body})"
    return f"ln(units) = {body}"
