"""Array aliases used across the numerical library."""

from __future__ import annotations

from typing import TypeAlias

import numpy as np
import numpy.typing as npt

FloatArray: TypeAlias = npt.NDArray[np.float64]
BoolArray: TypeAlias = npt.NDArray[np.bool_]
DateArray: TypeAlias = npt.NDArray[np.datetime64]
IntArray: TypeAlias = npt.NDArray[np.intp]
