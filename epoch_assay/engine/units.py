"""The one place where microvolts meet volts."""

from typing import overload

import numpy as np

VOLTS_PER_MICROVOLT = 1e-6


@overload
def uv_to_v(value_uv: float) -> float: ...
@overload
def uv_to_v(value_uv: np.ndarray) -> np.ndarray: ...
def uv_to_v(value_uv: float | np.ndarray) -> float | np.ndarray:
    """Convert microvolts to volts (an array stays an array of the same shape)."""
    return value_uv * VOLTS_PER_MICROVOLT


@overload
def v_to_uv(value_v: float) -> float: ...
@overload
def v_to_uv(value_v: np.ndarray) -> np.ndarray: ...
def v_to_uv(value_v: float | np.ndarray) -> float | np.ndarray:
    """Convert volts to microvolts (an array stays an array of the same shape)."""
    return value_v / VOLTS_PER_MICROVOLT
