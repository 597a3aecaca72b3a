"""Marginal's numerical library: demand models, fitting, elasticities, optimisation.

The public surface is re-exported here; submodules are implementation detail.
"""

from models.design import Term
from models.elasticity import ElasticityReport, ElasticityRow, elasticities
from models.errors import InsufficientDataError, ModelWarning, UnusableDataError
from models.fit import fit_demand, fit_many
from models.history import History
from models.ols import OLSStack, fit_ols_stack, newey_west_lags
from models.pooling import pool_family
from models.predict import Prediction, predict
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
from models.spec import ModelSpec, SpecError

__all__ = [
    "Catalogue",
    "Coefficient",
    "DataWindow",
    "DemandFit",
    "Diagnostics",
    "ElasticityReport",
    "ElasticityRow",
    "FitFailure",
    "FitWarning",
    "History",
    "InsufficientDataError",
    "ModelSpec",
    "ModelWarning",
    "OLSStack",
    "PooledElasticity",
    "Prediction",
    "Quality",
    "ScenarioProduct",
    "SpecError",
    "Term",
    "TrueDemand",
    "UnusableDataError",
    "elasticities",
    "fit_demand",
    "fit_many",
    "fit_ols_stack",
    "generate_catalogue",
    "newey_west_lags",
    "pool_family",
    "predict",
    "simulate_product",
]
