"""Marginal's numerical library: demand models, fitting, elasticities, optimisation.

Everything a user of the library needs is exported here; submodules are implementation
detail. The surface, by task:

* data and specification: :class:`History`, :class:`ModelSpec`, :class:`Term`,
  :data:`UNIT_COST`;
* borrowing strength: :func:`shrink_own_price` (own-price elasticities shrunk toward the
  family and the catalogue, :class:`Shrinkage`, :class:`ShrunkElasticity`), :func:`shrunk_fit`
  and the estimator behind them, :func:`normal_means` (:class:`NormalMeans`);
* fitting: :func:`fit_demand`, :func:`fit_many`, :func:`pool_family` and the fit record
  (:class:`DemandFit`, :class:`Coefficient`, :class:`Quality`, :class:`Diagnostics`,
  :class:`DataWindow`, :class:`FitWarning`, :class:`FitFailure`,
  :class:`PooledElasticity`) with the thresholds of its warnings (:data:`SIGNIFICANCE`,
  :data:`VIF_LIMIT`, :data:`WEAK_INSTRUMENT_F`);
* reading a fit: :func:`elasticities`, :func:`predict`, :func:`price_range_warning`,
  :func:`fitted_units`, :func:`fitted_periods`, :func:`holdout_units`;
* learning: :func:`plan_price_test` (a price test and what it should teach and cost),
  :func:`expected_outcomes` and :func:`drift_check` (watching outcomes after a fit);
* pricing: :func:`optimal_price`, :func:`optimal_family_prices`,
  :class:`PriceConstraints`, :class:`DemandCurve` and the recommendation records; moves
  calibrated by the catalogue: :func:`move_evidence` (:class:`MoveEvidence`),
  :func:`catalogue_spread`, :func:`calibrated_limit`;
* errors: every exception of the library (:mod:`models.errors`);
* the invented tea shop with known true demand: :func:`generate_catalogue`,
  :func:`simulate_product`, :data:`COVARIATES`, :data:`LOG_COVARIATES`.

Examples
--------
>>> import models
>>> product = models.generate_catalogue(7).product("TEA-004")
>>> spec = models.ModelSpec(covariates=models.COVARIATES, log_covariates=models.LOG_COVARIATES)
>>> fit = models.fit_demand(product.history, spec)
>>> answer = models.optimal_price(fit, unit_cost=product.unit_cost)
>>> fit.price_range[0] * 0.9 <= answer.recommended.price <= fit.price_range[1] * 1.1
True
"""

from models.checks import SIGNIFICANCE, VIF_LIMIT, WEAK_INSTRUMENT_F
from models.design import Term
from models.elasticity import ElasticityReport, ElasticityRow, elasticities
from models.errors import (
    InfeasibleConstraintsError,
    InsufficientDataError,
    InvalidConstraintsError,
    MissingUnitCostError,
    PricingInputError,
    SpecError,
    UnboundedObjectiveError,
    UnusableDataError,
    WrongSignError,
)
from models.fit import fit_demand, fit_many
from models.fitted import fitted_periods, fitted_units, holdout_units
from models.guards import price_range_warning
from models.history import History
from models.normal_means import NormalMeans, normal_means
from models.outcomes import DriftCheck, ExpectedOutcomes, drift_check, expected_outcomes
from models.pooling import pool_family
from models.predict import Prediction, predict
from models.price_plans import PriceTestPlan, plan_price_test
from models.pricing import (
    CurvePoint,
    DemandCurve,
    FamilyRecommendation,
    FamilyTotal,
    NamedLimit,
    PriceConstraints,
    PricePoint,
    PriceRecommendation,
    PriceUncertainty,
    TotalFigures,
    optimal_family_prices,
    optimal_price,
)
from models.pricing.calibrate import (
    CALIBRATION,
    MoveEvidence,
    calibrated_limit,
    calibrated_share,
    catalogue_spread,
    move_evidence,
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
    COVARIATES,
    LOG_COVARIATES,
    Catalogue,
    ScenarioProduct,
    TrueDemand,
    generate_catalogue,
    simulate_product,
)
from models.shrinkage import Shrinkage, ShrunkElasticity, shrink_own_price, shrunk_fit
from models.spec import UNIT_COST, ModelSpec

__all__ = [
    "CALIBRATION",
    "COVARIATES",
    "Catalogue",
    "Coefficient",
    "CurvePoint",
    "DataWindow",
    "DemandCurve",
    "DemandFit",
    "Diagnostics",
    "DriftCheck",
    "ElasticityReport",
    "ElasticityRow",
    "ExpectedOutcomes",
    "FamilyRecommendation",
    "FamilyTotal",
    "FitFailure",
    "FitWarning",
    "History",
    "InfeasibleConstraintsError",
    "InsufficientDataError",
    "InvalidConstraintsError",
    "LOG_COVARIATES",
    "MissingUnitCostError",
    "ModelSpec",
    "MoveEvidence",
    "NamedLimit",
    "NormalMeans",
    "PooledElasticity",
    "Prediction",
    "PriceConstraints",
    "PricePoint",
    "PriceRecommendation",
    "PriceTestPlan",
    "PriceUncertainty",
    "PricingInputError",
    "Quality",
    "SIGNIFICANCE",
    "ScenarioProduct",
    "Shrinkage",
    "ShrunkElasticity",
    "SpecError",
    "Term",
    "TotalFigures",
    "TrueDemand",
    "UNIT_COST",
    "UnboundedObjectiveError",
    "UnusableDataError",
    "VIF_LIMIT",
    "WEAK_INSTRUMENT_F",
    "WrongSignError",
    "calibrated_limit",
    "calibrated_share",
    "catalogue_spread",
    "drift_check",
    "elasticities",
    "expected_outcomes",
    "fit_demand",
    "fit_many",
    "fitted_periods",
    "fitted_units",
    "generate_catalogue",
    "holdout_units",
    "move_evidence",
    "normal_means",
    "optimal_family_prices",
    "optimal_price",
    "plan_price_test",
    "pool_family",
    "predict",
    "price_range_warning",
    "shrink_own_price",
    "shrunk_fit",
    "simulate_product",
]
