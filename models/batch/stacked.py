"""The entry point of stacked fitting: products grouped by window length, in chunks."""

from __future__ import annotations

import gc
from collections import defaultdict
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from typing import Final

import numpy as np

from models.batch.chunk import Chunk
from models.batch.layout import Layout
from models.design import variable_terms
from models.history import History
from models.result import DemandFit
from models.spec import ModelSpec

STACKED_FORMS: Final = ("linear", "log-log", "semi-log")
"""Forms fitted here; poisson and two-stage least squares go product by product."""

CHUNK: Final = 512
"""Products fitted together: large enough to spread each numpy call's overhead, small enough
to bound the arrays (about 4 MB each) when a caller passes a very large batch."""

_DAYS: Final = np.dtype("datetime64[D]")


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
            layout = Layout.of(spec, form, width, holdout_periods)
            for start in range(0, len(members), CHUNK):
                part = members[start : start + CHUNK]
                fits = Chunk(layout, [histories[i] for i in part]).fit(
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
