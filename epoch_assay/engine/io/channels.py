"""Channel positions of an epoch set: explicit, from a standard montage by name, or none.

Positions are in m, head coordinates, shape (n_channels, 3), NaN for a channel whose
position is unknown. Channels without a position are allowed; steps that need positions
say so in their ``check``.
"""

import mne
import numpy as np

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.montage import montage_positions

# common practice: electrodes sit within about 0.15 m of the head's origin; numbers far above
# that are millimetres or centimetres stored as metres.
MAX_POSITION_M = 0.5


def positions_from_montage(ch_names: tuple[str, ...], montage: str) -> np.ndarray:
    """Positions of ``ch_names`` in MNE's built-in montage ``montage``, shape (n_channels, 3), in m; NaN where
    the montage lacks a name. An unknown montage name is refused."""
    try:
        return montage_positions(ch_names, montage)
    except ValueError:
        available = ", ".join(mne.channels.get_builtin_montages())
        raise EpochSetFormatError(
            "montage",
            f"{montage!r} is not a standard montage",
            f"Use one of standard_1020, standard_1005, {available}; or give positions",
        ) from None


def checked_positions(positions: np.ndarray, n_channels: int) -> np.ndarray | None:
    """``positions`` as float64 (n_channels, 3) in m, or None when no channel has one.

    positions : array, shape (n_channels, 3), in m, NaN where unknown
    """
    if positions.dtype.kind not in "iuf" or positions.shape != (n_channels, 3):
        raise EpochSetFormatError(
            "positions",
            f"has shape {positions.shape} and dtype {positions.dtype}; a float "
            f"array of shape ({n_channels}, 3) is needed",
            "Give x, y, z in m per channel, NaN where unknown",
        )
    positions = positions.astype(np.float64)
    known = np.isfinite(positions).all(axis=1)
    partial = np.isfinite(positions).any(axis=1) & ~known
    if partial.any():
        raise EpochSetFormatError(
            "positions",
            f"channel {int(np.flatnonzero(partial)[0])} has some but not all coordinates",
            "Give all three coordinates, or NaN for all three",
        )
    largest = float(np.abs(positions[known]).max()) if known.any() else 0.0
    if largest > MAX_POSITION_M:
        raise EpochSetFormatError(
            "positions",
            f"a coordinate is {largest:g} m from the origin, more than a head allows ({MAX_POSITION_M} m)",
            "Give positions in metres (divide millimetres by 1000)",
        )
    return positions if known.any() else None


def merged_positions(explicit: np.ndarray | None, from_montage: np.ndarray | None) -> np.ndarray | None:
    """Explicit positions where known, the montage's elsewhere; None when neither knows any."""
    if explicit is None:
        return from_montage
    if from_montage is None:
        return explicit
    known = np.isfinite(explicit).all(axis=1, keepdims=True)
    return np.where(known, explicit, from_montage)
