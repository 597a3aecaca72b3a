"""Price optimisation on fitted demand curves: one product or a family jointly.

Public entry points are :func:`optimal_price` and :func:`optimal_family_prices`; they
are re-exported from :mod:`models`.
"""

from models.errors import (
    InfeasibleConstraintsError,
    InvalidConstraintsError,
    MissingUnitCostError,
    PricingInputError,
    UnboundedObjectiveError,
    WrongSignError,
)
from models.pricing.constraints import NamedLimit, PriceConstraints
from models.pricing.curve import DemandCurve
from models.pricing.family import optimal_family_prices
from models.pricing.result import (
    CurvePoint,
    FamilyRecommendation,
    FamilyTotal,
    PricePoint,
    PriceRecommendation,
    PriceUncertainty,
    TotalFigures,
)
from models.pricing.single import optimal_price

__all__ = [
    "CurvePoint",
    "DemandCurve",
    "FamilyRecommendation",
    "FamilyTotal",
    "InfeasibleConstraintsError",
    "InvalidConstraintsError",
    "MissingUnitCostError",
    "NamedLimit",
    "PriceConstraints",
    "PricePoint",
    "PriceRecommendation",
    "PriceUncertainty",
    "PricingInputError",
    "TotalFigures",
    "UnboundedObjectiveError",
    "WrongSignError",
    "optimal_family_prices",
    "optimal_price",
]
