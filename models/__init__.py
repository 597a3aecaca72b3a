"""Marginal's numerical library: demand models, fitting, elasticities, optimisation.

The public surface is re-exported here; submodules are implementation detail.
"""

from models.design import Term
from models.elasticity import ElasticityReport, ElasticityRow, elasticities
from models.errors import InsufficientDataError, SpecError, UnusableDataError
from models.fit import fit_demand, fit_many
from models.fitted import fitted_periods, fitted_units
from models.history import History
from models.ols import OLSStack, fit_ols_stack, newey_west_lags
from models.pooling import pool_family
from models.predict import Prediction, predict
from models.pricing import (
    CurvePoint,
    DemandCurve,
    FamilyRecommendation,
    FamilyTotal,
    InfeasibleConstraintsError,
    InvalidConstraintsError,
    MissingUnitCostError,
    PriceConstraints,
    PricePoint,
    PriceRecommendation,
    PriceUncertainty,
    PricingInputError,
    TotalFigures,
    UnboundedObjectiveError,
    WrongSignError,
    optimal_family_prices,
    optimal_price,
)
from models.result import (
    Coefficient,
    DataWindow,
    DemandFit,
    Diagnostics,
    FitFailure,
    FitWarning,
    PooledElasticity,
    Quality,
)
from models.scenario import (
    Catalogue,
    ScenarioProduct,
    TrueDemand,
    generate_catalogue,
    simulate_product,
)
from models.spec import ModelSpec

__all__ = [
    "Catalogue",
    "Coefficient",
    "CurvePoint",
    "DataWindow",
    "DemandCurve",
    "DemandFit",
    "Diagnostics",
    "ElasticityReport",
    "ElasticityRow",
    "FamilyRecommendation",
    "FamilyTotal",
    "FitFailure",
    "FitWarning",
    "History",
    "InfeasibleConstraintsError",
    "InsufficientDataError",
    "InvalidConstraintsError",
    "MissingUnitCostError",
    "ModelSpec",
    "OLSStack",
    "PooledElasticity",
    "Prediction",
    "PriceConstraints",
    "PricePoint",
    "PriceRecommendation",
    "PriceUncertainty",
    "PricingInputError",
    "Quality",
    "ScenarioProduct",
    "SpecError",
    "Term",
    "TotalFigures",
    "TrueDemand",
    "UnboundedObjectiveError",
    "UnusableDataError",
    "WrongSignError",
    "elasticities",
    "fit_demand",
    "fit_many",
    "fit_ols_stack",
    "fitted_periods",
    "fitted_units",
    "generate_catalogue",
    "newey_west_lags",
    "optimal_family_prices",
    "optimal_price",
    "pool_family",
    "predict",
    "simulate_product",
]
