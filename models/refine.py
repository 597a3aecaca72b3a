"""Least-squares refinement with residuals in double-double arithmetic.

A backward-stable solver (Householder QR) in double precision loses digits on designs
whose residuals are large beside the fitted values (NIST StRD Wampler4 and Wampler5 keep
only 6 to 8 significant digits that way): the error grows with the squared condition
number times the residual size. Iterative refinement of the augmented system
``[I X; X' 0] [r; b] = [y; 0]`` (Bjorck 1967, "Iterative refinement of linear least
squares solutions I", BIT 7, 257-278) removes that term when its residuals are computed in
higher precision. Here they are computed in double-double arithmetic, exact sums and
products of doubles (Dekker 1971, "A floating-point technique for extending the available
precision", Numerische Mathematik 18, 224-242), so the result does not depend on the
platform's ``long double``. Each step solves the correction with the thin QR factors the
solver already has; two steps reach the certified digits of every NIST StRD linear set
whose design double precision can hold exactly, and a member whose first step no longer
moved it takes no second one.
"""

from __future__ import annotations

from typing import Final

import numpy as np

from models._typing import FloatArray

_SPLITTER: Final = 134217729.0  # 2**27 + 1, Dekker's splitting constant for doubles
REFINEMENT_STEPS: Final = 2
_SETTLED: Final = 8.0 * float(np.finfo(np.float64).eps)
"""A step this small beside its coefficient (or its column's share of the response) ends
a member's refinement."""


def _two_sum(a: FloatArray, b: FloatArray) -> tuple[FloatArray, FloatArray]:
    """``a + b`` as a rounded sum and its exact rounding error (Knuth's TwoSum)."""
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


def _split(a: FloatArray) -> tuple[FloatArray, FloatArray]:
    c = _SPLITTER * a
    high = c - (c - a)
    return high, a - high


def _two_product(
    a: FloatArray, a_parts: tuple[FloatArray, FloatArray], b: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """``a * b`` as a rounded product and its exact rounding error (Dekker's TwoProduct).

    ``a_parts`` is ``_split(a)``, computed once by the caller for a reused operand.
    """
    p = a * b
    ah, al = a_parts
    bh, bl = _split(b)
    return p, ((ah * bh - p) + ah * bl + al * bh) + al * bl


def _pairwise_sum(high: FloatArray, low: FloatArray) -> FloatArray:
    """Double-double sum along the last axis, rounded to double at the end."""
    while high.shape[-1] > 1:
        if high.shape[-1] % 2:
            pad = np.zeros((*high.shape[:-1], 1))
            high = np.concatenate([high, pad], axis=-1)
            low = np.concatenate([low, pad], axis=-1)
        total, error = _two_sum(high[..., 0::2], high[..., 1::2])
        low = low[..., 0::2] + low[..., 1::2] + error
        high = total
    result: FloatArray = high[..., 0] + low[..., 0]
    return result


def residual_gap(
    columns: FloatArray,
    parts: tuple[FloatArray, FloatArray],
    response: FloatArray,
    resid: FloatArray,
    params: FloatArray,
) -> FloatArray:
    """``y - r - X b`` for a stack, accurate to about twice double precision.

    ``columns`` is (b, k, n) (one row per design column) and ``parts`` its Dekker split,
    ``response`` and ``resid`` (b, n), ``params`` (b, k).
    """
    high, low = _two_sum(response, -resid)
    for j in range(columns.shape[1]):
        column_parts = (parts[0][:, j, :], parts[1][:, j, :])
        product, product_error = _two_product(columns[:, j, :], column_parts, -params[:, j : j + 1])
        high, error = _two_sum(high, product)
        low = low + error + product_error
    result: FloatArray = high + low
    return result


def cross_residual(
    columns: FloatArray, parts: tuple[FloatArray, FloatArray], resid: FloatArray
) -> FloatArray:
    """``X' r`` for a stack (b, k), each sum accurate to about twice double precision."""
    product, product_error = _two_product(columns, parts, resid[:, None, :])
    return _pairwise_sum(product, product_error)


def refine(
    columns: FloatArray,
    response: FloatArray,
    params: FloatArray,
    q: FloatArray,
    r: FloatArray,
    *,
    steps: int = REFINEMENT_STEPS,
) -> tuple[FloatArray, FloatArray]:
    """Refined coefficients and residuals of ``response ~ columns`` for a stack.

    ``q`` (b, n, k) and ``r`` (b, k, k) are thin QR factors of the design (``X = q r``),
    which may carry the rounding errors of their own computation: each step solves the
    correction of the augmented system with them (Bjorck's formulas) after computing its
    right-hand side in double-double.

    Examples
    --------
    >>> x = np.arange(21.0)
    >>> design = np.stack([x**k for k in range(6)])[None]  # NIST StRD Wampler1's design
    >>> y = design[0].sum(axis=0)[None]  # every coefficient is exactly 1
    >>> q, r = np.linalg.qr(design.transpose(0, 2, 1))
    >>> start = np.linalg.solve(r, np.einsum("bnk,bn->bk", q, y)[:, :, None])[:, :, 0]
    >>> params, _ = refine(design, y, start, q, r)
    >>> bool(np.all(params == 1.0))
    True
    """
    params = params.copy()
    resid = response - np.matmul(params[:, None, :], columns)[:, 0, :]
    column_norms = np.sqrt(np.einsum("bkn,bkn->bk", columns, columns))
    response_norms = np.sqrt(np.einsum("bn,bn->b", response, response))
    active = np.arange(params.shape[0])
    for _ in range(steps):
        if not active.size:
            break
        # Only members whose last step still moved them are refined again, so a product's
        # figures never depend on the stack it was fitted in.
        x, y, e, b = columns[active], response[active], resid[active], params[active]
        parts = _split(x)
        gap = residual_gap(x, parts, y, e, b)
        grad = -cross_residual(x, parts, e)
        qa, ra = q[active], r[active]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            h = _triangular_solve(ra.transpose(0, 2, 1), grad, lower=True)
            d = np.einsum("bnk,bn->bk", qa, gap)
            step = _triangular_solve(ra, d - h, lower=False)
            resid[active] = e + gap - np.einsum("bnk,bk->bn", qa, d - h)
            params[active] = b + step
            settled = (np.abs(step) <= _SETTLED * np.abs(b + step)) | (
                np.abs(step) * column_norms[active] <= _SETTLED * response_norms[active, None]
            )
        active = active[~settled.all(axis=1)]
    return params, resid


def _triangular_solve(matrix: FloatArray, vector: FloatArray, *, lower: bool) -> FloatArray:
    """Solve a stack of triangular systems by substitution (batched, no LAPACK loop)."""
    k = matrix.shape[1]
    out = np.zeros_like(vector)
    order = range(k) if lower else range(k - 1, -1, -1)
    for i in order:
        done = np.einsum("bj,bj->b", matrix[:, i, :], out)
        out[:, i] = (vector[:, i] - done) / matrix[:, i, i]
    return out
