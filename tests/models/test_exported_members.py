"""The library's public surface: ``models.__all__`` is sorted, complete and importable."""

from __future__ import annotations

import inspect
from types import ModuleType

import models

SOLVER_INTERNALS = ("OLSStack", "fit_ols_stack", "newey_west_lags")

# What the web service takes from the library; it imports these from `models` itself.
USED_BY_SERVICE = (
    "DemandFit",
    "FitFailure",
    "History",
    "InfeasibleConstraintsError",
    "InsufficientDataError",
    "InvalidConstraintsError",
    "MissingUnitCostError",
    "ModelSpec",
    "PriceConstraints",
    "PricingInputError",
    "SIGNIFICANCE",
    "SpecError",
    "UNIT_COST",
    "UnusableDataError",
    "VIF_LIMIT",
    "WEAK_INSTRUMENT_F",
    "WrongSignError",
    "Catalogue",
    "ScenarioProduct",
    "elasticities",
    "fit_demand",
    "fit_many",
    "fitted_periods",
    "fitted_units",
    "generate_catalogue",
    "optimal_family_prices",
    "optimal_price",
    "pool_family",
    "predict",
    "price_range_warning",
)


def test_all_is_sorted_without_duplicates() -> None:
    assert models.__all__ == sorted(set(models.__all__))


def test_every_exported_name_exists() -> None:
    missing = [name for name in models.__all__ if not hasattr(models, name)]
    assert missing == []


def test_every_public_name_is_exported() -> None:
    public = sorted(
        name
        for name, value in vars(models).items()
        if not name.startswith("_") and not isinstance(value, ModuleType)
    )
    assert public == models.__all__


def test_star_import_gives_the_surface() -> None:
    namespace: dict[str, object] = {}
    exec("from models import *", namespace)
    assert sorted(k for k in namespace if k != "__builtins__") == models.__all__


def test_solver_internals_stay_in_their_modules() -> None:
    from models import ols

    for name in SOLVER_INTERNALS:
        assert name not in models.__all__
        assert hasattr(ols, name)


def test_what_the_service_uses_is_exported() -> None:
    assert sorted(set(USED_BY_SERVICE) - set(models.__all__)) == []


def test_every_exported_function_shows_an_example() -> None:
    functions = [name for name in models.__all__ if inspect.isfunction(getattr(models, name))]
    assert functions
    without = [name for name in functions if ">>>" not in (getattr(models, name).__doc__ or "")]
    assert without == []
