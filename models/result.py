"""The fit record: a frozen, JSON-round-trippable description of one fitted demand model."""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field, fields
from functools import partial
from itertools import chain, repeat
from operator import attrgetter, is_not, itemgetter, setitem
from typing import Any, Final, TypeVar

import numpy as np

from models._typing import FloatArray
from models.design import Term
from models.spec import ModelSpec


def clean(value: Any) -> Any:
    """JSON-safe copy: NaN and infinities become None, tuples become lists, numpy scalars floats."""
    if isinstance(value, Mapping):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    return value


_not_none = partial(is_not, None)
_estimates = attrgetter("estimate", "std_error", "t_stat", "p_value", "ci_low", "ci_high")
_vif = attrgetter("vif")


def _numbers_ok(values: Iterable[Any]) -> bool:
    """True when the values are plain Python numbers, all finite: what :func:`clean` keeps.

    Checked through their sum: a numpy scalar anywhere makes it a numpy scalar, and NaN
    or an infinity makes it non-finite (a finite overflow only sends the caller down
    the slow path).
    """
    try:
        total = sum(values)
    except TypeError:
        return False
    kind = type(total)
    return kind is int or (kind is float and total - total == 0.0)


def _record(value: Any) -> Any:
    """``clean(vars(value))`` for a record, None for None."""
    return None if value is None else clean(vars(value))


def _num(value: Any) -> float:
    """Float from a stored value; None (a stored NaN) comes back as NaN."""
    return math.nan if value is None else float(value)


def _opt_num(value: Any) -> float | None:
    return None if value is None else float(value)


@dataclass(frozen=True)
class FitWarning:
    """A machine-readable warning code with a sentence for people."""

    code: str
    message: str


@dataclass(frozen=True)
class Coefficient:
    """One row of the coefficient table (``vif`` is None for the intercept)."""

    term: str
    estimate: float
    std_error: float
    t_stat: float
    p_value: float
    ci_low: float
    ci_high: float
    vif: float | None


@dataclass(frozen=True)
class Quality:
    """Goodness of fit. For ``poisson``, ``r_squared`` is the deviance R-squared and
    ``sigma`` the square root of the Pearson dispersion; for 2SLS ``aic``/``bic`` are None."""

    n_obs: int
    r_squared: float | None
    adj_r_squared: float | None
    f_stat: float | None
    f_p_value: float | None
    sigma: float
    aic: float | None
    bic: float | None
    holdout_wape: float | None


@dataclass(frozen=True)
class Diagnostics:
    """Residual and design diagnostics; IV figures are None without instruments."""

    condition_number: float | None
    durbin_watson: float | None
    breusch_pagan_p: float | None
    jarque_bera_p: float | None
    first_stage_f: float | None = None
    endogeneity_p: float | None = None


@dataclass(frozen=True)
class DataWindow:
    """Which periods the fit used and what was left out.

    ``n_window_excluded`` counts the older periods of the history that the window
    (``window_periods``, the most recent ones) left out, the first of them on
    ``window_excluded_from``; 0 and None when the window held the whole history.
    """

    first_period: str
    last_period: str
    n_obs: int
    n_window: int
    n_stockouts_excluded: int
    n_zero_units_dropped: int
    n_missing_dropped: int
    holdout_periods: int
    n_window_excluded: int = 0
    window_excluded_from: str | None = None


_window_counts = itemgetter(
    "n_obs",
    "n_window",
    "n_stockouts_excluded",
    "n_zero_units_dropped",
    "n_missing_dropped",
    "holdout_periods",
    "n_window_excluded",
)


@dataclass(frozen=True)
class PooledElasticity:
    """Empirical-Bayes shrinkage of the own-price elasticity toward the family mean."""

    family: str
    raw: float
    raw_std_error: float
    pooled: float
    pooled_std_error: float
    family_mean: float
    between_variance: float
    weight_on_family: float
    n_products: int


@dataclass(frozen=True)
class DemandFit:
    """A fitted demand model for one product.

    Attributes
    ----------
    sku, spec, form
        Product, requested spec, and the fitted form (the chosen one under ``auto``).
    terms : tuple of Term
        Design columns in coefficient order.
    coefficients : tuple of Coefficient
        The coefficient table.
    covariance : tuple of tuple of float
        Covariance matrix of the estimates (term order).
    quality, diagnostics, warnings, equation
        The fit record.
    df_resid : int
        Residual degrees of freedom.
    use_t : bool
        Intervals use Student's t with ``df_resid`` (False: normal, for Poisson).
    variable_means, variable_latest : dict
        Price, cross prices and covariates: means over the fitted periods and the
        latest fitted period's values (points for elasticities; predictions and prices
        start from :attr:`default_values`).
    regressor_means, regressor_latest : dict
        Means and latest values of every non-intercept design column, by term name.
    variable_events : tuple of str
        Covariates that took only the values 0 and 1 in the fitted periods (a promotion, a
        holiday): events, which :attr:`default_values` turns off.
    price_range : tuple of float
        Lowest and highest own price in the fitted periods.
    candidate_scores : dict
        Rolling-origin WAPE of each candidate form under ``auto`` (None: could not be scored).
    window : DataWindow
        Data window.
    smearing : float or None
        Duan's smearing factor ``mean(exp(residual))`` for the log forms.
    pooled : PooledElasticity or None
        Family-pooled own-price elasticity when ``pooling="family"``.

    Examples
    --------
    >>> from models import COVARIATES, LOG_COVARIATES, ModelSpec, fit_demand, simulate_product
    >>> product = simulate_product(1, elasticity=-2.0, price_noise=0.15)
    >>> spec = ModelSpec(covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    >>> fit = fit_demand(product.history, spec)
    >>> fit.form, fit.term_names[:3]
    ('log-log', ('intercept', 'ln(price)', 'ln(rival_price)'))
    >>> row = fit.own_price
    >>> row.term, round(row.estimate, 2), row.ci_low < -2.0 < row.ci_high
    ('ln(price)', -1.75, True)
    """

    sku: str
    spec: ModelSpec
    form: str
    terms: tuple[Term, ...]
    coefficients: tuple[Coefficient, ...]
    covariance: tuple[tuple[float, ...], ...]
    quality: Quality
    diagnostics: Diagnostics
    warnings: tuple[FitWarning, ...]
    equation: str
    df_resid: int
    use_t: bool
    variable_means: dict[str, float]
    variable_latest: dict[str, float]
    regressor_means: dict[str, float]
    regressor_latest: dict[str, float]
    price_range: tuple[float, float]
    window: DataWindow
    smearing: float | None = None
    candidate_scores: dict[str, float | None] = field(default_factory=dict)
    pooled: PooledElasticity | None = None
    variable_events: tuple[str, ...] = ()

    @property
    def default_values(self) -> dict[str, float]:
        """The values a driver takes when a prediction or a price does not say: the latest
        fitted period's, with events off. A regular price is set for a regular period: the
        latest period may be a holiday or a promotion, which the caller turns on by name."""
        values = dict(self.variable_latest)
        values.update(dict.fromkeys(self.variable_events, 0.0))
        return values

    @property
    def term_names(self) -> tuple[str, ...]:
        return tuple(t.name for t in self.terms)

    @property
    def params(self) -> FloatArray:
        return np.array([c.estimate for c in self.coefficients])

    @property
    def cov(self) -> FloatArray:
        return np.array(self.covariance, dtype=np.float64)

    def coefficient(self, term: str) -> Coefficient:
        """The coefficient row of a term, by name."""
        for row in self.coefficients:
            if row.term == term:
                return row
        raise KeyError(term)

    @property
    def own_price(self) -> Coefficient:
        """The own-price coefficient row."""
        return self.coefficients[[t.kind for t in self.terms].index("own_price")]

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe mapping (no NaN or infinity) that :meth:`from_dict` restores.

        Keys follow the field order; tuples become lists, records dicts, and NaN or
        infinities None (see :func:`clean`).
        """
        if not (vars(self).get(_PLAIN_NUMBERS) is True or self._numbers_are_plain()):
            return self._to_dict_field_by_field()
        # Every number is a plain finite Python number already: each part is a plain copy.
        scores = self.candidate_scores
        return {
            "sku": self.sku,
            "spec": self.spec.to_dict(),
            "form": self.form,
            "terms": list(map(Term.to_dict, self.terms)),
            "coefficients": list(map(dict.copy, map(vars, self.coefficients))),
            "covariance": list(map(list, self.covariance)),
            "quality": vars(self.quality).copy(),
            "diagnostics": vars(self.diagnostics).copy(),
            "warnings": [clean(vars(w)) for w in self.warnings],
            "equation": self.equation,
            "df_resid": self.df_resid,
            "use_t": self.use_t if type(self.use_t) is bool else clean(self.use_t),
            "variable_means": dict(self.variable_means),
            "variable_latest": dict(self.variable_latest),
            "regressor_means": dict(self.regressor_means),
            "regressor_latest": dict(self.regressor_latest),
            "price_range": list(self.price_range),
            "window": vars(self.window).copy(),
            "smearing": self.smearing,
            "candidate_scores": (
                dict(scores) if _numbers_ok(filter(_not_none, scores.values())) else clean(scores)
            ),
            "pooled": _record(self.pooled),
            "variable_events": list(self.variable_events),
        }

    def _numbers_are_plain(self) -> bool:
        """Whether every number outside ``candidate_scores`` and ``pooled`` is a plain finite one.

        One pass over all of them (see :func:`_numbers_ok`); the texts must be strings.
        """
        coefficients, window = self.coefficients, vars(self.window)
        numbers = chain(
            chain.from_iterable(map(_estimates, coefficients)),
            filter(_not_none, map(_vif, coefficients)),
            chain.from_iterable(self.covariance),
            filter(_not_none, vars(self.quality).values()),
            filter(_not_none, vars(self.diagnostics).values()),
            self.variable_means.values(),
            self.variable_latest.values(),
            self.regressor_means.values(),
            self.regressor_latest.values(),
            self.price_range,
            (self.df_resid, 0.0 if self.smearing is None else self.smearing),
            _window_counts(window),
        )
        texts = (self.sku, self.form, self.equation, window["first_period"], window["last_period"])
        return _numbers_ok(numbers) and all(map(str.__instancecheck__, texts))

    def _to_dict_field_by_field(self) -> dict[str, Any]:
        """:meth:`to_dict` the long way: every value through :func:`clean`."""
        out: dict[str, Any] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name == "spec":
                out["spec"] = value.to_dict()
            elif f.name == "terms":
                out["terms"] = [t.to_dict() for t in value]
            elif f.name in ("coefficients", "warnings"):
                out[f.name] = [clean(vars(row)) for row in value]
            elif f.name in ("quality", "diagnostics", "window", "pooled"):
                out[f.name] = _record(value)
            else:
                out[f.name] = clean(value)
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> DemandFit:
        """Rebuild a fit stored with :meth:`to_dict`."""
        coefficients = tuple(
            Coefficient(
                term=str(row["term"]),
                estimate=_num(row["estimate"]),
                std_error=_num(row["std_error"]),
                t_stat=_num(row["t_stat"]),
                p_value=_num(row["p_value"]),
                ci_low=_num(row["ci_low"]),
                ci_high=_num(row["ci_high"]),
                vif=_opt_num(row["vif"]),
            )
            for row in data["coefficients"]
        )
        quality = dict(data["quality"])
        pooled = data.get("pooled")
        return cls(
            sku=str(data["sku"]),
            spec=ModelSpec.from_dict(data["spec"]),
            form=str(data["form"]),
            terms=tuple(Term.from_dict(t) for t in data["terms"]),
            coefficients=coefficients,
            covariance=tuple(tuple(_num(v) for v in row) for row in data["covariance"]),
            quality=Quality(
                n_obs=int(quality.pop("n_obs")),
                sigma=_num(quality.pop("sigma")),
                **{k: _opt_num(v) for k, v in quality.items()},
            ),
            diagnostics=Diagnostics(**{k: _opt_num(v) for k, v in data["diagnostics"].items()}),
            warnings=tuple(FitWarning(str(w["code"]), str(w["message"])) for w in data["warnings"]),
            equation=str(data["equation"]),
            df_resid=int(data["df_resid"]),
            use_t=bool(data["use_t"]),
            variable_means={str(k): _num(v) for k, v in data["variable_means"].items()},
            variable_latest={str(k): _num(v) for k, v in data["variable_latest"].items()},
            regressor_means={str(k): _num(v) for k, v in data["regressor_means"].items()},
            regressor_latest={str(k): _num(v) for k, v in data["regressor_latest"].items()},
            price_range=(float(data["price_range"][0]), float(data["price_range"][1])),
            window=DataWindow(**data["window"]),
            smearing=_opt_num(data.get("smearing")),
            candidate_scores={
                str(k): _opt_num(v) for k, v in (data.get("candidate_scores") or {}).items()
            },
            pooled=None if pooled is None else PooledElasticity(**pooled),
            # Fits stored before events were recorded turn none off.
            variable_events=tuple(str(k) for k in data.get("variable_events") or ()),
        )


@dataclass(frozen=True)
class FitFailure:
    """A product of a batch that could not be fitted.

    Attributes
    ----------
    sku : str
    reason : str
        A sentence for people.
    error : str
        The error class name (``InsufficientDataError``, ``UnusableDataError``, ...).
    n_obs, n_required : int or None
        Filled for insufficient data.
    """

    sku: str
    reason: str
    error: str
    n_obs: int | None = None
    n_required: int | None = None

    def to_dict(self) -> dict[str, Any]:
        return dict(clean(vars(self)))


_PLAIN_NUMBERS: Final = "_plain_numbers"
"""Instance-dictionary note (never a field) on a :class:`DemandFit` built in bulk whose
numbers, outside ``candidate_scores`` and ``pooled``, are all plain finite Python numbers
or None: :meth:`DemandFit.to_dict` then skips its scan. Records are frozen, so the note
stays true; copies made with ``dataclasses.replace`` do not carry it."""


def note_plain_numbers(fits: Iterable[DemandFit]) -> None:
    """Note on each of ``fits`` that its numbers are plain and finite (see ``_PLAIN_NUMBERS``).

    Only for builders that know it, e.g. from a vectorised check of the arrays they
    filled the records from.
    """
    for fit in fits:
        vars(fit)[_PLAIN_NUMBERS] = True


R = TypeVar("R")


def build_records(
    cls: type[R],
    count: int,
    varying: Mapping[str, Sequence[Any]],
    fixed: Mapping[str, Any] | None = None,
) -> list[R]:
    """``count`` instances of the frozen dataclass ``cls``, built field by field.

    ``varying`` gives each of its fields' values for all instances in order; ``fixed``
    the values all instances share; together they name every field. ``cls(...)``
    would assign each field through ``object.__setattr__`` in Python; batches build
    hundreds of thousands of records, so here every instance dictionary is a copy of
    one template (fields in order) filled column by column, all in the interpreter's
    builtins. Only for classes without ``__post_init__``: the instances then equal
    those ``__init__`` builds.
    """
    names = [f.name for f in fields(cls)]  # type: ignore[arg-type]
    fixed = fixed or {}
    if sorted(names) != sorted([*varying, *fixed]):
        raise ValueError(f"{cls.__name__} needs each of its fields exactly once: {names}")
    if any(len(values) != count for values in varying.values()):
        raise ValueError(f"every varying {cls.__name__} field needs {count} values")
    # The template is the dictionary of an instance, so that its copies share the class's
    # key table as instance dictionaries do (half the memory, quicker to copy and fill).
    prototype = cls(*(fixed.get(name) for name in names))
    dicts = list(map(dict.copy, repeat(vars(prototype), count)))
    for name, values in varying.items():
        deque(map(setitem, dicts, repeat(name), values), maxlen=0)
    instances: list[R] = list(map(_new_instance, repeat(cls, count)))
    deque(map(_set_attribute, instances, repeat("__dict__"), dicts), maxlen=0)
    return instances


_new_instance: Any = object.__new__
_set_attribute = object.__setattr__
