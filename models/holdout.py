"""Hold-out scoring: refit without the last periods and measure WAPE on them.

Reported coefficients always use every usable period; ``holdout_wape`` comes from a
separate fit that leaves out the last periods and predicts them.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Final

import numpy as np

from models._typing import FloatArray
from models.design import Design
from models.engine import FittedDesign, fit_designs, head, required_obs
from models.errors import InsufficientDataError
from models.forecast import expected_units, smearing_factor, wape
from models.spec import LOG_RESPONSE_FORMS, ModelSpec

DEFAULT_HOLDOUT: Final = 13
"""Periods held out for ``holdout_wape`` by default (a quarter of weekly data).

Never more than a quarter of the rows."""


def holdout_size(design: Design, requested: int | None) -> int:
    """Periods to hold out of ``design`` (0: none).

    Raises
    ------
    ValueError
        ``requested`` is negative.
    InsufficientDataError
        The periods before the requested hold-out are too few to fit the model.
    """
    rows = design.regressors.shape[0]
    need = required_obs(len(design.terms))
    if requested is None:
        size = min(DEFAULT_HOLDOUT, rows // 4)
        return size if size > 0 and int(design.usable[: rows - size].sum()) >= need else 0
    if requested < 0:
        raise ValueError("holdout_periods must not be negative")
    if requested and int(design.usable[: max(rows - requested, 0)].sum()) < need:
        raise InsufficientDataError(
            design.sku,
            int(design.usable[: max(rows - requested, 0)].sum()),
            need,
            f"after holding out the last {requested} periods",
        )
    return requested


def holdout_predictions(
    designs: Sequence[Design], sizes: Sequence[int], spec: ModelSpec
) -> list[FloatArray | None]:
    """Expected units of each design's last ``sizes[i]`` rows from a fit on the rows before.

    None where nothing is held out or the training fit fails.
    """
    members = [i for i, h in enumerate(sizes) if h > 0]
    out: list[FloatArray | None] = [None] * len(designs)
    train = [head(designs[i], designs[i].regressors.shape[0] - sizes[i]) for i in members]
    for i, result in zip(members, fit_designs(train, spec), strict=True):
        if not isinstance(result, FittedDesign):
            continue
        design, start = designs[i], designs[i].regressors.shape[0] - sizes[i]
        smearing = (
            smearing_factor(result.estimate.resid) if design.form in LOG_RESPONSE_FORMS else None
        )
        rows = design.regressors[start:][:, list(result.kept)]
        out[i] = expected_units(design.form, rows, result.estimate.params, smearing)
    return out


def holdout_wapes(
    designs: Sequence[Design], sizes: Sequence[int], spec: ModelSpec
) -> list[float | None]:
    """WAPE of each design's last ``sizes[i]`` rows predicted from a fit on the rows before.

    None where nothing is held out, the training fit fails, or the held-out units sum to 0.
    """
    out: list[float | None] = []
    for design, size, predicted in zip(
        designs, sizes, holdout_predictions(designs, sizes, spec), strict=True
    ):
        if predicted is None:
            out.append(None)
            continue
        score = wape(design.units[design.regressors.shape[0] - size :], predicted)
        out.append(score if np.isfinite(score) else None)
    return out
