"""Fit many products of one window length at once: the common case of ``fit_many``.

For the least-squares forms, every step :func:`~models.fit.fit_demand` takes for one
product (window, exclusions, design, QR fit, diagnostics, hold-out WAPE, smearing,
warnings, equation) is taken here for a chunk of products on [product, period] arrays,
and each fit record is then filled from ready Python values. A product that needs more
care (a missing variable, a non-positive value under a log, too few observations, terms
to drop, dates not in days) comes back as None for the caller to fit on its own, so
every figure stays that of ``fit_demand``.
"""

from __future__ import annotations

import gc
import math
from collections import defaultdict, deque
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, fields
from itertools import compress, repeat
from operator import setitem
from typing import Final

import numpy as np

from models._typing import BoolArray, DateArray, FloatArray, IntArray
from models.checks import (
    MIN_OBS_PER_TERM,
    MIN_PRICE_CV,
    SIGNIFICANCE,
    VIF_LIMIT,
    equation_text,
    warnings_from_figures,
)
from models.design import PRICE, Term, build_design, fixed_columns, fixed_terms, variable_terms
from models.engine import required_obs
from models.estimate import critical_value
from models.history import History
from models.holdout import DEFAULT_HOLDOUT, holdout_wapes
from models.ols import OLSStack, fit_ols_params, fit_ols_stack
from models.result import (
    Coefficient,
    DataWindow,
    DemandFit,
    Diagnostics,
    FitWarning,
    Quality,
    build_records,
    note_plain_numbers,
)
from models.spec import LOG_RESPONSE_FORMS, ModelSpec

STACKED_FORMS: Final = ("linear", "log-log", "semi-log")
"""Forms fitted here; poisson and two-stage least squares go product by product."""

CHUNK: Final = 512
"""Products fitted together: large enough to spread each numpy call's overhead, small enough
to bound the arrays (about 4 MB each) when a caller passes a very large batch."""

INTERCEPT: Final = Term("intercept", "intercept", None, "fixed")
_DAYS: Final = np.dtype("datetime64[D]")

Rows = slice | IntArray
"""Periods of each product taken by a step: the same slice for all, or indices per product."""


def stacked_path_applies(spec: ModelSpec, form: str) -> bool:
    """Whether :func:`fit_stacked` handles ``form`` under ``spec``."""
    return form in STACKED_FORMS and not spec.instruments


def fit_stacked(
    histories: Sequence[History],
    spec: ModelSpec,
    form: str,
    *,
    holdout_periods: int | None,
    candidate_scores: Sequence[dict[str, float | None]],
) -> list[DemandFit | None]:
    """Fit records for the products this path covers, None for the others.

    Parameters
    ----------
    histories : sequence of History
    spec : ModelSpec
        The requested spec (stored in each record as given, ``auto`` included).
    form : str
        The fitted form, one of :data:`STACKED_FORMS`.
    holdout_periods : int, optional
        As in :func:`~models.fit.fit_demand`.
    candidate_scores : sequence of dict
        Each product's ``auto`` scores (empty dicts otherwise).
    """
    out: list[DemandFit | None] = [None] * len(histories)
    if not stacked_path_applies(spec, form) or (holdout_periods or 0) < 0:
        return out
    terms = variable_terms(spec, form)
    cross = {str(t.source) for t in terms if t.kind == "cross_price"}
    covariates = {str(t.source) for t in terms if t.kind == "covariate"}
    groups: dict[int, list[int]] = defaultdict(list)
    for i, history in enumerate(histories):
        if (
            history.periods.dtype == _DAYS
            and history.cross_prices.keys() >= cross
            and history.covariates.keys() >= covariates
        ):
            groups[min(history.n_periods, spec.window_periods)].append(i)
    with _collector_paused():
        for width, members in groups.items():
            layout = _Layout.of(spec, form, width, holdout_periods)
            for start in range(0, len(members), CHUNK):
                part = members[start : start + CHUNK]
                fits = _Chunk(layout, [histories[i] for i in part]).fit(
                    [candidate_scores[i] for i in part]
                )
                for i, fit in zip(part, fits, strict=True):
                    out[i] = fit
    return out


@contextmanager
def _collector_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while records are built.

    The records hold no reference cycles, but their many small containers would
    otherwise trigger repeated collections that traverse everything alive.
    """
    if not gc.isenabled():
        yield
        return
    gc.disable()
    try:
        yield
    finally:
        gc.enable()


@dataclass(frozen=True)
class _Layout:
    """What every chunk of one window length shares: terms, names, equation template."""

    spec: ModelSpec
    form: str
    width: int
    requested: int | None
    var_terms: tuple[Term, ...]
    terms: tuple[Term, ...]
    names: tuple[str, ...]
    log_response: bool
    equation: str

    @classmethod
    def of(cls, spec: ModelSpec, form: str, width: int, requested: int | None) -> _Layout:
        var_terms = tuple(variable_terms(spec, form))
        terms = (INTERCEPT, *var_terms, *fixed_terms(spec))
        # equation_text's layout, with each sign and magnitude left to fill in.
        body = "%.4g" + "".join(f" %s %.4g {t.name.replace('%', '%%')}" for t in terms[1:])
        return cls(
            spec=spec,
            form=form,
            width=width,
            requested=requested,
            var_terms=var_terms,
            terms=terms,
            names=tuple(t.name for t in terms),
            log_response=form in LOG_RESPONSE_FORMS,
            equation=("units = " if form == "linear" else "ln(units) = ") + body,
        )


@dataclass(frozen=True)
class _Plan:
    """Exclusions and hold-out split of each product of a chunk, as fit_demand makes them."""

    ok: IntArray
    keep: BoolArray
    usable: BoolArray
    n_usable: IntArray
    n_missing: IntArray
    n_stockouts: IntArray
    n_zero: IntArray
    holdout: IntArray
    train: BoolArray
    test: BoolArray

    def subset(self, ok: IntArray) -> _Plan:
        """The plan of the accepted products only (``ok`` keeps their original positions)."""
        arrays = {f.name: getattr(self, f.name)[ok] for f in fields(self) if f.name != "ok"}
        return _Plan(ok=ok, **arrays)


class _Chunk:
    """Up to :data:`CHUNK` products of one window length, fitted together."""

    def __init__(self, layout: _Layout, histories: list[History]) -> None:
        self.layout = layout
        self.histories = histories
        self.full = all(h.n_periods == layout.width for h in histories)

    def _take(self, arrays: list[np.ndarray]) -> np.ndarray:
        """The window of each product's array, as [product, period]."""
        width = self.layout.width
        if not self.full:
            arrays = [a[a.shape[0] - width :] for a in arrays]
        return np.concatenate(arrays).reshape(len(arrays), width)

    def _floats(self, arrays: list[np.ndarray]) -> FloatArray:
        return np.asarray(self._take(arrays), dtype=np.float64)

    def _raw(self) -> dict[str, FloatArray]:
        histories = self.histories
        values = {PRICE: self._floats([h.price for h in histories])}
        for term in self.layout.var_terms[1:]:
            source = str(term.source)
            if term.kind == "cross_price":
                values[source] = self._floats([h.cross_prices[source] for h in histories])
            else:
                values[source] = self._floats([h.covariates[source] for h in histories])
        return values

    def _plan(self, raw: dict[str, FloatArray], units: FloatArray) -> _Plan:
        """The exclusions and checks of ``build_design``, ``check_size`` and ``holdout_size``."""
        layout = self.layout
        b, width = units.shape
        need = required_obs(len(layout.terms))
        keep = np.isfinite(units)
        for values in raw.values():
            keep &= np.isfinite(values)
        n_missing = width - keep.sum(axis=1)
        n_stockouts = np.zeros(b, dtype=np.intp)
        if layout.spec.exclude_stockouts:
            out_of_stock = ~self._take([h.in_stock for h in self.histories])
            n_stockouts = (out_of_stock & keep).sum(axis=1)
            keep &= ~out_of_stock
        refused = np.zeros(b, dtype=bool)
        for term in layout.var_terms:
            if term.transform == "log":
                refused |= (keep & ~(raw[str(term.source)] > 0.0)).any(axis=1)
        if layout.log_response:
            positive = units > 0.0
            usable = keep & positive
            n_zero = (keep & ~positive).sum(axis=1)
        else:
            refused |= (keep & (units < 0.0)).any(axis=1)
            usable = keep
            n_zero = np.zeros(b, dtype=np.intp)
        n_usable = usable.sum(axis=1)
        refused |= n_usable < need

        # The hold-out is the last design rows (kept periods), predicted from those before.
        rows = keep.sum(axis=1)
        row_number = np.cumsum(keep, axis=1)
        if layout.requested is None:
            size = np.minimum(DEFAULT_HOLDOUT, rows // 4)
        else:
            size = np.full(b, layout.requested)
        train = usable & (row_number <= (rows - size)[:, None])
        n_train = train.sum(axis=1)
        if layout.requested is None:
            size = np.where((size > 0) & (n_train >= need), size, 0)
        elif layout.requested > 0:
            refused |= n_train < need  # fit_demand raises; the caller reports it
        return _Plan(
            ok=np.flatnonzero(~refused),
            keep=keep,
            usable=usable,
            n_usable=n_usable,
            n_missing=n_missing,
            n_stockouts=n_stockouts,
            n_zero=n_zero,
            holdout=size,
            train=train & (size > 0)[:, None],
            test=keep & (row_number > (rows - size)[:, None]),
        )

    def fit(self, scores: list[dict[str, float | None]]) -> list[DemandFit | None]:
        """Records of the products fitted here (None for the others), in chunk order.

        Products are stacked by their number of usable periods; a stack member whose
        design turns out rank-deficient is left to the caller.
        """
        out: list[DemandFit | None] = [None] * len(self.histories)
        raw = self._raw()
        units = self._floats([h.units for h in self.histories])
        plan = self._plan(raw, units)
        ok = plan.ok
        if ok.size == 0:
            return out
        if ok.size < len(self.histories):
            raw = {k: v[ok] for k, v in raw.items()}
            units = units[ok]
            plan = plan.subset(ok)
        periods: DateArray = self._take([self.histories[i].periods for i in ok.tolist()])
        design, response = self._design(raw, units, periods)
        width = self.layout.width
        for m in np.unique(plan.n_usable).tolist():
            members = np.flatnonzero(plan.n_usable == m)
            rows = _rows(plan.usable[members], m)
            x = _gather(design, members, rows)
            stack = fit_ols_stack(
                x.transpose(0, 2, 1),
                _gather(response, members, rows),
                cov_type=self.layout.spec.standard_errors,
                method="qr",
            )
            deficient = np.zeros(members.size, dtype=bool)
            deficient[stack.rank_deficient] = True
            wapes = self._holdout_wapes(plan, members, deficient, design, response, units)
            first, last = _ends(rows, width, members.size)
            records = self._records(
                stack,
                x,
                plan,
                members,
                {s: _gather(v, members, rows) for s, v in raw.items()},
                _day_strings(periods[members, first]),
                _day_strings(periods[members, last]),
                wapes,
                [scores[i] for i in ok[members].tolist()],
            )
            for local, record, bad in zip(
                ok[members].tolist(), records, deficient.tolist(), strict=True
            ):
                if not bad:
                    out[local] = record
        return out

    def _design(
        self, raw: dict[str, FloatArray], units: FloatArray, periods: DateArray
    ) -> tuple[FloatArray, FloatArray]:
        """Design and response of every window period, as [product, column, period].

        Fits gather their periods; the transposed view is the usual [product, period,
        column] design, and this layout keeps element-wise work along whole periods.
        """
        layout = self.layout
        b, width = units.shape
        n_var = len(layout.var_terms)
        design = np.empty((b, len(layout.terms), width))
        design[:, 0, :] = 1.0
        # Excluded periods may hold NaN or non-positive values; they are never gathered.
        with np.errstate(divide="ignore", invalid="ignore"):
            for j, term in enumerate(layout.var_terms, start=1):
                values = raw[str(term.source)]
                if term.transform == "log":
                    np.log(values, out=design[:, j, :])
                else:
                    design[:, j, :] = values
            fixed = list(layout.terms[1 + n_var :])
            if fixed:
                design[:, 1 + n_var :, :] = fixed_columns(periods, fixed).transpose(0, 2, 1)
            response = np.log(units) if layout.log_response else units
        return design, response

    def _holdout_wapes(
        self,
        plan: _Plan,
        members: IntArray,
        deficient: BoolArray,
        design: FloatArray,
        response: FloatArray,
        units: FloatArray,
    ) -> list[float | None]:
        """Hold-out WAPE of each member, as ``models.holdout.holdout_wapes`` computes it."""
        layout = self.layout
        size = plan.holdout[members]
        train, test = plan.train[members], plan.test[members]
        n_train = train.sum(axis=1)
        scores = np.full(members.size, np.nan)
        alone: list[int] = []
        scored = (size > 0) & ~deficient
        keys = n_train * (layout.width + 1) + size
        for key in np.unique(keys[scored]).tolist():
            group = np.flatnonzero(scored & (keys == key))
            m, h = divmod(key, layout.width + 1)
            rows = _rows(train[group], m)
            params, resid, singular = fit_ols_params(
                _gather(design, members[group], rows).transpose(0, 2, 1),
                _gather(response, members[group], rows),
            )
            held = _rows(test[group], h)
            x_held = _gather(design, members[group], held)
            linear = np.matmul(params[:, None, :], x_held)[:, 0, :]
            if layout.log_response:
                predicted = np.exp(linear) * np.exp(resid).mean(axis=1)[:, None]
            else:
                predicted = linear
            actual = _gather(units, members[group], held)
            total = np.abs(actual).sum(axis=1)
            with np.errstate(divide="ignore", invalid="ignore"):
                scores[group] = np.where(
                    total > 0, np.abs(actual - predicted).sum(axis=1) / total, np.nan
                )
            alone.extend(group[singular].tolist())
        out = _optional(scores)
        for local in alone:
            # A singular training fit drops terms first: the single-product route does that.
            history = self.histories[int(plan.ok[members[local]])]
            single = build_design(history, layout.spec, layout.form)
            out[local] = holdout_wapes([single], [int(size[local])], layout.spec)[0]
        return out

    def _records(
        self,
        stack: OLSStack,
        x: FloatArray,
        plan: _Plan,
        members: IntArray,
        variables: dict[str, FloatArray],
        first_days: list[str],
        last_days: list[str],
        wapes: list[float | None],
        scores: list[dict[str, float | None]],
    ) -> list[DemandFit]:
        """One fit record per stack member, from per-stack arrays turned into lists."""
        layout = self.layout
        terms, form, spec, names = layout.terms, layout.form, layout.spec, layout.names
        b, k = stack.params.shape
        params, bse, pvalues, vif = stack.params, stack.bse, stack.pvalues, stack.vif
        with np.errstate(divide="ignore", invalid="ignore"):
            tstat = np.where(bse > 0, params / bse, np.nan)
        crit = critical_value(0.95, stack.df_resid)

        price = variables[PRICE]
        price_mean = price.mean(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            price_cv = np.where(price_mean > 0, np.std(price, axis=1) / price_mean, 0.0)
        n_usable = plan.n_usable[members]
        n_stockouts = plan.n_stockouts[members]
        n_zero = plan.n_zero[members]
        n_missing = plan.n_missing[members]
        flagged = (
            (params[:, 1] > 0.0)
            | ~(pvalues[:, 1] < SIGNIFICANCE)
            | (n_usable < MIN_OBS_PER_TERM * k)
            | (price_cv < MIN_PRICE_CV)
            | (np.isfinite(vif) & (vif > VIF_LIMIT)).any(axis=1)
            | (n_stockouts > 0)
            | (n_zero > 0)
            | (n_missing > 0)
        )
        warnings: list[tuple[FitWarning, ...]] = [()] * b
        for i in np.flatnonzero(flagged).tolist():
            warnings[i] = warnings_from_figures(
                form=form,
                terms=terms,
                own_coef=float(params[i, 1]),
                own_p_value=float(pvalues[i, 1]),
                n_obs=int(n_usable[i]),
                price_cv=float(price_cv[i]),
                vifs=vif[i].tolist(),
                n_stockouts=int(n_stockouts[i]),
                n_window=layout.width,
                n_zero_dropped=int(n_zero[i]),
                n_missing=int(n_missing[i]),
            )

        var_names = list(variables)
        var_means = np.stack([v.mean(axis=1) for v in variables.values()], axis=1)
        var_latest = np.stack([v[:, -1] for v in variables.values()], axis=1)
        reg_names = names[1:]
        reg_means, reg_latest = x.mean(axis=2)[:, 1:], x[:, 1:, -1]
        ci_low, ci_high = params - crit * bse, params + crit * bse
        price_low, price_high = price.min(axis=1), price.max(axis=1)
        smearing = np.exp(stack.resid).mean(axis=1) if layout.log_response else np.zeros(b)
        vif_values = vif.astype(object)
        vif_values[:, 0] = None
        vif_values[~np.isfinite(vif)] = None
        # Every member's coefficient rows in one run of b * k, then k at a time per member.
        coefficients = build_records(
            Coefficient,
            b * k,
            {
                "term": names * b,
                "estimate": params.ravel().tolist(),
                "std_error": bse.ravel().tolist(),
                "t_stat": tstat.ravel().tolist(),
                "p_value": pvalues.ravel().tolist(),
                "ci_low": ci_low.ravel().tolist(),
                "ci_high": ci_high.ravel().tolist(),
                "vif": vif_values.ravel().tolist(),
            },
        )
        cov_rows = zip(*[iter(stack.cov.ravel().tolist())] * k, strict=True)
        n_obs = n_usable.tolist()
        quality = build_records(
            Quality,
            b,
            {
                "n_obs": n_obs,
                "r_squared": _optional(stack.r_squared),
                "adj_r_squared": _optional(stack.adj_r_squared),
                "f_stat": _optional(stack.f_stat),
                "f_p_value": _optional(stack.f_p_value),
                "sigma": stack.sigma.tolist(),
                "aic": _optional(stack.aic),
                "bic": _optional(stack.bic),
                "holdout_wape": wapes,
            },
        )
        diagnostics = build_records(
            Diagnostics,
            b,
            {
                "condition_number": _optional(stack.condition_number),
                "durbin_watson": _optional(stack.durbin_watson),
                "breusch_pagan_p": _optional(stack.breusch_pagan_p),
                "jarque_bera_p": _optional(stack.jarque_bera_p),
            },
            {"first_stage_f": None, "endogeneity_p": None},
        )
        window = build_records(
            DataWindow,
            b,
            {
                "first_period": first_days,
                "last_period": last_days,
                "n_obs": n_obs,
                "n_stockouts_excluded": n_stockouts.tolist(),
                "n_zero_units_dropped": n_zero.tolist(),
                "n_missing_dropped": n_missing.tolist(),
                "holdout_periods": plan.holdout[members].tolist(),
            },
            {"n_window": layout.width},
        )
        fits = build_records(
            DemandFit,
            b,
            {
                "sku": [self.histories[i].sku for i in plan.ok[members].tolist()],
                "coefficients": list(zip(*[iter(coefficients)] * k, strict=True)),
                "covariance": list(zip(*[cov_rows] * k, strict=True)),
                "quality": quality,
                "diagnostics": diagnostics,
                "warnings": warnings,
                "equation": self._equations(params),
                "variable_means": _mappings(var_names, var_means),
                "variable_latest": _mappings(var_names, var_latest),
                "regressor_means": _mappings(reg_names, reg_means),
                "regressor_latest": _mappings(reg_names, reg_latest),
                "price_range": list(zip(price_low.tolist(), price_high.tolist(), strict=True)),
                "window": window,
                "smearing": smearing.tolist() if layout.log_response else [None] * b,
                "candidate_scores": scores,
            },
            {
                "spec": spec,
                "form": form,
                "terms": terms,
                "df_resid": stack.df_resid,
                "use_t": True,
                "pooled": None,
            },
        )
        # Figures that are not already None where undefined are plain floats from the
        # arrays; where all of those are finite, to_dict need not look at them again.
        plain = (
            _finite_rows(params, bse, tstat, pvalues, ci_low, ci_high, stack.cov)
            & _finite_rows(var_means, var_latest, reg_means, reg_latest)
            & _finite_rows(stack.sigma, price_low, price_high, smearing)
        )
        note_plain_numbers(compress(fits, plain.tolist()))
        return fits

    def _equations(self, params: FloatArray) -> list[str]:
        """``equation_text`` of every member, each formatted through one template."""
        layout = self.layout
        b, k = params.shape
        values = np.empty((b, 2 * k - 1), dtype=object)
        values[:, 0] = params[:, 0]
        values[:, 1::2] = np.where(params[:, 1:] < 0, "-", "+")
        values[:, 2::2] = np.abs(params[:, 1:])
        equations: list[str] = list(map(layout.equation.__mod__, map(tuple, values.tolist())))
        for i in np.flatnonzero(~np.isfinite(params).all(axis=1)).tolist():
            equations[i] = equation_text(layout.form, layout.terms, params[i].tolist())
        return equations


def _rows(mask: BoolArray, count: int) -> Rows:
    """Periods where ``mask`` holds, ``count`` per product: a slice when the same for all."""
    width = mask.shape[1]
    if count == width or mask[:, :count].all():
        return slice(0, count)
    if mask[:, width - count :].all():
        return slice(width - count, width)
    return np.nonzero(mask)[1].reshape(mask.shape[0], count)


def _gather(values: np.ndarray, members: IntArray, rows: Rows) -> np.ndarray:
    """``values`` (periods on the last axis) of the given members at the given periods."""
    picked = values if members.size == values.shape[0] else values[members]  # members sorted
    if isinstance(rows, slice):
        return picked[..., rows]
    index = rows.reshape(rows.shape[0], *([1] * (values.ndim - 2)), rows.shape[1])
    return np.take_along_axis(picked, index, axis=-1)


def _ends(rows: Rows, width: int, count: int) -> tuple[IntArray, IntArray]:
    """Positions of each member's first and last gathered period."""
    if isinstance(rows, slice):
        start, stop, _ = rows.indices(width)
        return np.full(count, start), np.full(count, stop - 1)
    return rows[:, 0], rows[:, -1]


def _day_strings(days: DateArray) -> list[str]:
    """ISO dates, formatted once per distinct day (members mostly share their dates)."""
    distinct, where = np.unique(days, return_inverse=True)
    text: list[str] = np.datetime_as_string(distinct).tolist()
    return [text[j] for j in where.tolist()]


def _mappings(names: Sequence[str], values: FloatArray) -> list[dict[str, float]]:
    """One name-to-value dict per row of ``values``, filled column by column from a template."""
    dicts: list[dict[str, float]] = list(
        map(dict.copy, repeat(dict.fromkeys(names, 0.0), values.shape[0]))
    )
    for name, column in zip(names, values.T.tolist(), strict=True):
        deque(map(setitem, dicts, repeat(name), column), maxlen=0)
    return dicts


def _finite_rows(*arrays: FloatArray) -> BoolArray:
    """Per member (first axis): whether every value of every array is finite."""
    finite = np.ones(arrays[0].shape[0], dtype=bool)
    for values in arrays:
        finite &= np.isfinite(values.reshape(values.shape[0], -1)).all(axis=1)
    return finite


def _optional(values: FloatArray) -> list[float | None]:
    listed: list[float | None] = values.tolist()
    if np.isfinite(values).all():
        return listed
    return [_finite_or_none(v) for v in listed]


def _finite_or_none(value: float | None) -> float | None:
    return value if value is not None and math.isfinite(value) else None
