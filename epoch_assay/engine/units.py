"""The one place where microvolts meet volts."""

import numpy as np

VOLTS_PER_MICROVOLT = 1e-6


def uv_to_v(value_uv: float | np.ndarray) -> float | np.ndarray:
    """Convert microvolts to volts."""
    return value_uv * VOLTS_PER_MICROVOLT


def v_to_uv(value_v: float | np.ndarray) -> float | np.ndarray:
    """Convert volts to microvolts."""
    return value_v / VOLTS_PER_MICROVOLT
