"""The model specification: which demand form to fit and with which drivers.

A :class:`ModelSpec` is plain data; the service stores it as JSON and validates
client input through :meth:`ModelSpec.from_dict`, which reports every problem at once.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any, Final

from models.errors import SpecError

FORMS: Final = ("linear", "log-log", "semi-log", "poisson", "auto")
FITTED_FORMS: Final = ("linear", "log-log", "semi-log", "poisson")
LOG_RESPONSE_FORMS: Final = ("log-log", "semi-log")
SEASONALITIES: Final = ("none", "month", "fourier")
STANDARD_ERRORS: Final = ("classical", "hc0", "hc1", "hc2", "hc3", "hac")
POOLINGS: Final = ("none", "family")
_NAME_LISTS: Final = (
    "covariates",
    "log_covariates",
    "cross_prices",
    "instruments",
    "log_instruments",
)
UNIT_COST: Final = "unit_cost"
"""The name under which a history's unit cost serves as an instrument for the own price."""


@dataclass(frozen=True)
class ModelSpec:
    """What to fit for one product (or for every product of a batch).

    Parameters
    ----------
    form : str
        ``"linear"``, ``"log-log"`` (default), ``"semi-log"``, ``"poisson"`` or ``"auto"``.
    covariates : tuple of str
        Names of the history's covariates that enter the equation.
    log_covariates : tuple of str
        Subset of ``covariates`` entered as natural logs (their coefficients
        are elasticities in the log forms).
    cross_prices : tuple of str
        Skus of other products whose prices enter as cross-price terms (in logs
        for ``log-log`` and ``poisson``, in levels otherwise).
    seasonality : str
        ``"none"``, ``"month"`` (eleven month dummies) or ``"fourier"`` (two annual harmonics).
    trend : bool
        Add a linear time trend (in years).
    standard_errors : str
        ``"hc3"`` (default: heteroskedasticity-robust, well behaved in small samples,
        Long & Ervin 2000), ``"hc0"`` (White 1980), ``"hc1"`` (HC0 times n / (n - k), the
        "robust" errors most software reports), ``"hc2"``, ``"classical"`` or ``"hac"``
        (Newey-West); formulas in :mod:`models.sandwich`.
    instruments : tuple of str
        Excluded instruments for the own price (``"unit_cost"`` or covariate names
        not among ``covariates``); non-empty means two-stage least squares.
    log_instruments : tuple of str
        Subset of ``instruments`` entered as natural logs; the others enter in levels
        (so an instrument that is zero in some periods can be used).
    window_periods : int
        Fit on at most this many most recent periods.
    exclude_stockouts : bool
        Leave out periods flagged as out of stock (their sales understate demand).
    pooling : str
        ``"none"`` or ``"family"`` (empirical-Bayes shrinkage of own-price elasticities).

    Examples
    --------
    >>> spec = ModelSpec.from_dict({"form": "log-log", "covariates": ["promo"]})
    >>> spec.to_dict()["covariates"]
    ['promo']
    """

    form: str = "log-log"
    covariates: tuple[str, ...] = ()
    log_covariates: tuple[str, ...] = ()
    cross_prices: tuple[str, ...] = ()
    seasonality: str = "none"
    trend: bool = False
    standard_errors: str = "hc3"
    instruments: tuple[str, ...] = ()
    log_instruments: tuple[str, ...] = ()
    window_periods: int = 104
    exclude_stockouts: bool = True
    pooling: str = "none"

    def __post_init__(self) -> None:
        for name in _NAME_LISTS:
            value = getattr(self, name)
            if isinstance(value, list):  # accept lists from callers; store tuples
                object.__setattr__(self, name, tuple(value))
        problems = _problems(self)
        if problems:
            raise SpecError(problems)

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> ModelSpec:
        """Validate a JSON-like mapping and build a spec.

        Raises :class:`SpecError` listing every problem found.
        """
        if not isinstance(data, Mapping):
            raise SpecError([("spec", "must be an object")])
        known = {f.name for f in fields(cls)}
        problems: list[tuple[str, str]] = [
            (str(name), "unknown field") for name in data if name not in known
        ]
        values: dict[str, Any] = {}
        for name in known & set(data):
            value = data[name]
            default = getattr(_DEFAULT, name)
            if isinstance(default, tuple):
                if (
                    isinstance(value, str)
                    or not isinstance(value, Sequence)
                    or not all(isinstance(v, str) and v for v in value)
                ):
                    problems.append((name, "must be a list of non-empty strings"))
                    continue
                values[name] = tuple(value)
            elif isinstance(default, bool):
                if not isinstance(value, bool):
                    problems.append((name, "must be true or false"))
                    continue
                values[name] = value
            elif isinstance(default, int):
                if isinstance(value, bool) or not isinstance(value, int):
                    problems.append((name, "must be an integer"))
                    continue
                values[name] = value
            else:
                if not isinstance(value, str):
                    problems.append((name, "must be a string"))
                    continue
                values[name] = value
        if problems:
            raise SpecError(problems)
        return cls(**values)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready mapping (lists for tuples) that :meth:`from_dict` accepts."""
        return {
            name: list(value) if isinstance(value, tuple) else value
            for name, value in vars(self).items()
        }

    def with_form(self, form: str) -> ModelSpec:
        """The same spec with another form (used when ``auto`` has chosen)."""
        return ModelSpec(**{**_as_kwargs(self), "form": form})


def _as_kwargs(spec: ModelSpec) -> dict[str, Any]:
    return {f.name: getattr(spec, f.name) for f in fields(spec)}


def _choice(
    problems: list[tuple[str, str]], name: str, value: str, allowed: tuple[str, ...]
) -> None:
    if value not in allowed:
        problems.append((name, f"must be one of {', '.join(allowed)}; got {value!r}"))


def _problems(spec: ModelSpec) -> list[tuple[str, str]]:
    problems: list[tuple[str, str]] = []
    _choice(problems, "form", spec.form, FORMS)
    _choice(problems, "seasonality", spec.seasonality, SEASONALITIES)
    _choice(problems, "standard_errors", spec.standard_errors, STANDARD_ERRORS)
    _choice(problems, "pooling", spec.pooling, POOLINGS)
    for name in _NAME_LISTS:
        values = getattr(spec, name)
        if not isinstance(values, tuple):
            problems.append((name, "must be a tuple of names"))
            continue
        if len(set(values)) != len(values):
            problems.append((name, "contains duplicates"))
        reserved = {"price", "units", "intercept", "trend"}
        if name not in ("instruments", "log_instruments") and reserved & set(values):
            problems.append((name, f"may not use the reserved names {sorted(reserved)}"))
    extra_logs = set(spec.log_covariates) - set(spec.covariates)
    if extra_logs:
        problems.append(("log_covariates", f"not listed in covariates: {sorted(extra_logs)}"))
    extra_log_instruments = set(spec.log_instruments) - set(spec.instruments)
    if extra_log_instruments:
        problems.append(
            ("log_instruments", f"not listed in instruments: {sorted(extra_log_instruments)}")
        )
    clash = set(spec.covariates) & set(spec.cross_prices)
    if clash:
        problems.append(("cross_prices", f"also listed as covariates: {sorted(clash)}"))
    included = set(spec.instruments) & (set(spec.covariates) | set(spec.cross_prices))
    if included:
        problems.append(
            ("instruments", f"must be excluded from the equation, but {sorted(included)} are in it")
        )
    if spec.instruments and spec.form in ("poisson", "auto"):
        problems.append(
            ("instruments", "two-stage least squares needs linear, log-log or semi-log")
        )
    if isinstance(spec.window_periods, bool) or not isinstance(spec.window_periods, int):
        problems.append(("window_periods", "must be an integer"))
    elif spec.window_periods < 4:
        problems.append(("window_periods", "must be at least 4"))
    if not isinstance(spec.trend, bool):
        problems.append(("trend", "must be true or false"))
    if not isinstance(spec.exclude_stockouts, bool):
        problems.append(("exclude_stockouts", "must be true or false"))
    return problems


_DEFAULT: Final = ModelSpec()
