"""Which terms a design can estimate: the rank decision by pivoted QR.

The regressors (every column but the intercept) are centred and scaled to unit length,
then factored by Householder QR with column pivoting (LAPACK ``geqp3`` through
``scipy.linalg.qr``). A column counts as independent while its pivoted diagonal exceeds
``max(n, p) * eps`` times the largest one, the tolerance numpy's ``matrix_rank`` and
LAPACK-based least-squares drivers use. A design that passes is solved as given, however
badly conditioned; one that does not loses as many columns as its rank falls short, taken
in design order (a column stays when it adds to the rank of those kept before it), each
with the reason: it never varies (a constant, which the intercept already carries), or it
is a linear combination of named other terms.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg

from models._typing import FloatArray


@dataclass(frozen=True)
class Redundant:
    """A design column that cannot be estimated beside the others.

    Attributes
    ----------
    index : int
        The column (never 0, the intercept).
    partners : tuple of int
        Columns it is a linear combination of; empty when it never varies.
    """

    index: int
    partners: tuple[int, ...] = ()


def rank_tolerance(n_rows: int, n_columns: int) -> float:
    """Relative diagonal size below which a pivoted column is dependent: ``max(n, p) eps``."""
    return max(n_rows, n_columns) * float(np.finfo(np.float64).eps)


def redundant_columns(design: FloatArray) -> list[Redundant]:
    """Columns of ``design`` (column 0 the intercept) to drop, in column order.

    Examples
    --------
    >>> x = np.arange(8.0)
    >>> design = np.column_stack([np.ones(8), x, np.full(8, 2.0), 3.0 * x, x**2])
    >>> redundant_columns(design)
    [Redundant(index=2, partners=()), Redundant(index=3, partners=(1,))]
    """
    n = design.shape[0]
    values = design[:, 1:]
    centred = values - values.mean(axis=0)
    norms = np.linalg.norm(centred, axis=0)
    magnitude = np.maximum(np.abs(values).max(axis=0, initial=0.0), np.finfo(float).tiny)
    varies = (norms > 1e-13 * np.sqrt(n) * magnitude) & np.isfinite(norms)
    found = [Redundant(int(j) + 1) for j in np.flatnonzero(~varies)]
    live = np.flatnonzero(varies)
    if live.size:
        unit = centred[:, live] / norms[live]
        _, r, _ = linalg.qr(unit, mode="economic", pivoting=True)
        diagonal = np.abs(np.diagonal(r))
        floor = rank_tolerance(n, live.size) * diagonal[0]
        rank = int(np.sum(diagonal > floor))
        if rank < live.size:
            # Which columns go: taken in design order, a column stays when it adds to the
            # rank of those kept before it, so the own price (column 1) stays if anything.
            kept: list[int] = []
            for position in range(live.size):
                trial = unit[:, [*kept, position]]
                r_trial: FloatArray = np.asarray(linalg.qr(trial, mode="r")[0])
                last = float(abs(r_trial[len(kept), len(kept)]))
                if last > floor and len(kept) < rank:
                    kept.append(position)
                    continue
                coef = np.linalg.lstsq(unit[:, kept], unit[:, position], rcond=None)[0]
                involved = np.asarray(kept)[np.abs(coef) > 1e-8 * np.abs(coef).max(initial=0.0)]
                partners = tuple(int(live[j]) + 1 for j in involved)
                found.append(Redundant(int(live[position]) + 1, partners))
    return sorted(found, key=lambda item: item.index)
