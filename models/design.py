"""Turn a :class:`~models.history.History` and a spec into a regression design.

The design keeps every usable period (after the window, stockout and
missing-value exclusions). Rows whose response cannot be formed (zero units under
a log form) stay in ``regressors`` for out-of-sample prediction but are marked
unusable for fitting, so nothing is dropped silently.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Final

import numpy as np

from models._typing import BoolArray, DateArray, FloatArray
from models.errors import UnusableDataError
from models.history import History
from models.spec import LOG_RESPONSE_FORMS, UNIT_COST, ModelSpec

LOG_PRICE_FORMS: Final = ("log-log", "poisson")
FOURIER_HARMONICS: Final = 2
DAYS_PER_YEAR: Final = 365.25
TREND_ORIGIN: Final = np.datetime64("2000-01-01", "D")
PRICE: Final = "price"


@dataclass(frozen=True)
class Term:
    """One column of the design.

    Attributes
    ----------
    name : str
        Display name, e.g. ``"ln(price)"`` or ``"promo"``.
    kind : str
        ``intercept``, ``own_price``, ``cross_price``, ``covariate``, ``season`` or ``trend``.
    source : str or None
        The variable the column is computed from (``"price"``, a covariate name or a sku).
    transform : str
        ``"log"`` or ``"level"`` for variable columns, ``"fixed"`` for the others.
    """

    name: str
    kind: str
    source: str | None
    transform: str

    def column(self, value: float) -> float:
        """The design value of this term for a variable value."""
        if self.transform == "log":
            if not value > 0.0:
                raise UnusableDataError(
                    f"{self.source} must be positive for the log term {self.name}"
                )
            return float(np.log(value))
        return float(value)

    def to_dict(self) -> dict[str, str | None]:
        return {
            "name": self.name,
            "kind": self.kind,
            "source": self.source,
            "transform": self.transform,
        }

    @classmethod
    def from_dict(cls, data: dict[str, str | None]) -> Term:
        return cls(
            name=str(data["name"]),
            kind=str(data["kind"]),
            source=data["source"],
            transform=str(data["transform"]),
        )


@dataclass(frozen=True)
class Design:
    """Design matrix and bookkeeping for one product and one form."""

    sku: str
    form: str
    terms: tuple[Term, ...]
    periods: DateArray
    regressors: FloatArray
    response: FloatArray
    units: FloatArray
    usable: BoolArray
    variables: dict[str, FloatArray]
    instruments: FloatArray | None
    n_window: int
    n_stockouts: int
    n_missing: int
    n_zero_dropped: int
    n_window_excluded: int = 0
    window_excluded_from: str | None = None

    @property
    def n_usable(self) -> int:
        return int(self.usable.sum())

    def fitting_rows(self) -> tuple[FloatArray, FloatArray]:
        """Design and response rows used for estimation."""
        return self.regressors[self.usable], self.response[self.usable]

    def without_terms(self, drop: set[int]) -> Design:
        """The same design without some columns (rank-deficient terms)."""
        keep = [j for j in range(len(self.terms)) if j not in drop]
        return replace(
            self, terms=tuple(self.terms[j] for j in keep), regressors=self.regressors[:, keep]
        )


def variable_terms(spec: ModelSpec, form: str) -> list[Term]:
    """Own price, cross-price and covariate terms, in design order."""
    log_price = form in LOG_PRICE_FORMS
    terms = [
        Term(
            "ln(price)" if log_price else "price",
            "own_price",
            PRICE,
            "log" if log_price else "level",
        )
    ]
    for sku in spec.cross_prices:
        name = f"ln(price[{sku}])" if log_price else f"price[{sku}]"
        terms.append(Term(name, "cross_price", sku, "log" if log_price else "level"))
    for cov in spec.covariates:
        logged = cov in spec.log_covariates
        terms.append(
            Term(f"ln({cov})" if logged else cov, "covariate", cov, "log" if logged else "level")
        )
    return terms


def fixed_terms(spec: ModelSpec) -> list[Term]:
    """Seasonal and trend terms (values depend on the date only)."""
    terms: list[Term] = []
    if spec.seasonality == "month":
        terms += [Term(f"month_{m:02d}", "season", None, "fixed") for m in range(2, 13)]
    elif spec.seasonality == "fourier":
        for h in range(1, FOURIER_HARMONICS + 1):
            terms += [
                Term(f"sin_{h}", "season", None, "fixed"),
                Term(f"cos_{h}", "season", None, "fixed"),
            ]
    if spec.trend:
        terms.append(Term("trend", "trend", None, "fixed"))
    return terms


def fixed_columns(periods: DateArray, terms: list[Term]) -> FloatArray:
    """Seasonal dummies / harmonics and the trend (years since 2000-01-01) for given dates.

    ``periods`` may have any shape; the columns are added as a last axis.
    """
    days = (periods.astype("datetime64[D]") - TREND_ORIGIN).astype(np.float64)
    months = periods.astype("datetime64[M]").astype(np.int64) % 12 + 1
    cols = []
    for term in terms:
        if term.name.startswith("month_"):
            cols.append((months == int(term.name[-2:])).astype(np.float64))
        elif term.name.startswith(("sin_", "cos_")):
            angle = 2.0 * np.pi * int(term.name[4:]) * days / DAYS_PER_YEAR
            cols.append(np.sin(angle) if term.name.startswith("sin") else np.cos(angle))
        else:
            cols.append(days / DAYS_PER_YEAR)
    return np.stack(cols, axis=-1) if cols else np.empty((*periods.shape, 0))


def _variable_values(history: History, source: str, kind: str) -> FloatArray:
    if kind == "own_price":
        return history.price
    group = history.cross_prices if kind == "cross_price" else history.covariates
    if source not in group:
        where = "cross prices" if kind == "cross_price" else "covariates"
        raise UnusableDataError(f"{history.sku}: the history has no {where} entry {source!r}")
    return group[source]


def _instrument_values(history: History, name: str) -> FloatArray:
    if name == UNIT_COST:
        return history.unit_cost
    if name not in history.covariates:
        raise UnusableDataError(f"{history.sku}: the instrument {name!r} is not in the history")
    return history.covariates[name]


def build_design(history: History, spec: ModelSpec, form: str) -> Design:
    """Build the design of ``history`` for one fitted form (not ``auto``).

    Raises
    ------
    UnusableDataError
        A variable is missing from the history, or a log term meets a non-positive value.
    """
    start = max(history.n_periods - spec.window_periods, 0)
    window = slice(start, history.n_periods)
    n_window = history.n_periods - start
    var_terms = variable_terms(spec, form)
    raw = {t.source: _variable_values(history, str(t.source), t.kind)[window] for t in var_terms}
    instrument_raw = [_instrument_values(history, name)[window] for name in spec.instruments]
    units = history.units[window]

    keep = np.isfinite(units) & np.all([np.isfinite(v) for v in raw.values()], axis=0)
    for values in instrument_raw:
        keep &= np.isfinite(values)
    n_missing = int(n_window - keep.sum())
    n_stockouts = 0
    if spec.exclude_stockouts:
        out = ~history.in_stock[window]
        n_stockouts = int((out & keep).sum())
        keep &= ~out

    cols = [np.ones(int(keep.sum()))]
    for term in var_terms:
        values = raw[term.source][keep]
        if term.transform == "log":
            if np.any(values <= 0.0):
                raise UnusableDataError(
                    f"{history.sku}: {term.source} has non-positive values, "
                    "so it cannot enter as a log"
                )
            values = np.log(values)
        cols.append(values)
    periods = history.periods[window][keep]
    fixed = fixed_terms(spec)
    regressors = np.column_stack([*cols, fixed_columns(periods, fixed)])

    kept_units = units[keep]
    if form in LOG_RESPONSE_FORMS:
        usable = kept_units > 0.0
        response = np.full(kept_units.shape, np.nan)
        response[usable] = np.log(kept_units[usable])
    else:
        if np.any(kept_units < 0.0):
            raise UnusableDataError(f"{history.sku}: units must not be negative")
        usable = np.ones(kept_units.shape, dtype=bool)
        response = kept_units.astype(np.float64)

    instruments = None
    if instrument_raw:
        inst_cols = []
        for name, values in zip(spec.instruments, instrument_raw, strict=True):
            values = values[keep]
            if name in spec.log_instruments:
                if np.any(values <= 0.0):
                    raise UnusableDataError(
                        f"{history.sku}: instrument {name} has non-positive values, "
                        "so it cannot enter as a log (leave it out of log_instruments)"
                    )
                values = np.log(values)
            inst_cols.append(values)
        instruments = np.column_stack(inst_cols)

    return Design(
        sku=history.sku,
        form=form,
        terms=(Term("intercept", "intercept", None, "fixed"), *var_terms, *fixed),
        periods=periods,
        regressors=regressors,
        response=response,
        units=kept_units,
        usable=usable,
        variables={str(k): v[keep] for k, v in raw.items()},
        instruments=instruments,
        n_window=n_window,
        n_stockouts=n_stockouts,
        n_missing=n_missing,
        n_zero_dropped=int((~usable).sum()),
        n_window_excluded=start,
        window_excluded_from=str(history.periods[0]) if start else None,
    )


def event_covariates(
    covariates: Sequence[str], variables: Mapping[str, FloatArray]
) -> list[tuple[str, ...]]:
    """Per product (rows of 2-D values; a 1-D array is one product): the covariates whose
    fitted values are all 0 or 1. Such a driver marks an event (a promotion, a holiday) that
    a default scenario leaves off; any other value makes it an amount, held at its latest."""
    names = [c for c in covariates if c in variables]
    if not names:
        first = next(iter(variables.values()), np.zeros(1))
        return [()] * np.atleast_2d(first).shape[0]
    flags = np.stack(
        [np.all(np.isin(np.atleast_2d(variables[n]), (0.0, 1.0)), axis=1) for n in names], axis=1
    )
    return [tuple(n for n, on in zip(names, row, strict=True) if on) for row in flags.tolist()]
