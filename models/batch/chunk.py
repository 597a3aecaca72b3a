"""One chunk of products of equal window length: exclusions, designs, stacked fits."""

from __future__ import annotations

import numpy as np

from models._typing import BoolArray, DateArray, FloatArray, IntArray
from models.batch.arrays import day_strings, gather, optional_floats, period_rows, row_ends
from models.batch.layout import Layout, Plan
from models.batch.records import stack_records
from models.design import PRICE, build_design, fixed_columns
from models.engine import required_obs
from models.history import History
from models.holdout import DEFAULT_HOLDOUT, holdout_wapes
from models.ols import fit_ols_params, fit_ols_stack
from models.result import DemandFit


class Chunk:
    """Up to :data:`~models.batch.stacked.CHUNK` products of one window length, fitted together."""

    def __init__(self, layout: Layout, histories: list[History]) -> None:
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

    def _plan(self, raw: dict[str, FloatArray], units: FloatArray) -> Plan:
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
        return Plan(
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
            rows = period_rows(plan.usable[members], m)
            x = gather(design, members, rows)
            stack = fit_ols_stack(
                x.transpose(0, 2, 1),
                gather(response, members, rows),
                cov_type=self.layout.spec.standard_errors,
                method="qr",
            )
            deficient = np.zeros(members.size, dtype=bool)
            deficient[stack.rank_deficient] = True
            wapes = self._holdout_wapes(plan, members, deficient, design, response, units)
            first, last = row_ends(rows, width, members.size)
            records = stack_records(
                self.layout,
                self.histories,
                stack,
                x,
                plan,
                members,
                {s: gather(v, members, rows) for s, v in raw.items()},
                day_strings(periods[members, first]),
                day_strings(periods[members, last]),
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
        plan: Plan,
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
            rows = period_rows(train[group], m)
            params, resid, singular = fit_ols_params(
                gather(design, members[group], rows).transpose(0, 2, 1),
                gather(response, members[group], rows),
            )
            held = period_rows(test[group], h)
            x_held = gather(design, members[group], held)
            linear = np.matmul(params[:, None, :], x_held)[:, 0, :]
            if layout.log_response:
                predicted = np.exp(linear) * np.exp(resid).mean(axis=1)[:, None]
            else:
                predicted = linear
            actual = gather(units, members[group], held)
            total = np.abs(actual).sum(axis=1)
            with np.errstate(divide="ignore", invalid="ignore"):
                scores[group] = np.where(
                    total > 0, np.abs(actual - predicted).sum(axis=1) / total, np.nan
                )
            alone.extend(group[singular].tolist())
        out = optional_floats(scores)
        for local in alone:
            # A singular training fit drops terms first: the single-product route does that.
            history = self.histories[int(plan.ok[members[local]])]
            single = build_design(history, layout.spec, layout.form)
            out[local] = holdout_wapes([single], [int(size[local])], layout.spec)[0]
        return out
