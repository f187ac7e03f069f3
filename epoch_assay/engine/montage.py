"""Electrode positions: those an epoch set carries, or MNE's standard montages by channel name."""

from functools import lru_cache

import mne
import numpy as np

from epoch_assay.engine.epochs import SCORED_CHANNEL_TYPES, EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError

DEFAULT_MONTAGE = "standard_1020"

# MNE 1.13 renamed its template montages after the head they were measured on; the
# positions are the same, so the old names are translated when the new ones exist.
_RENAMED_MONTAGES = {"standard_1020": "colin27_1020", "standard_1005": "colin27_1005"}


def builtin_montage_name(name: str) -> str:
    """The name under which the installed MNE offers the montage ``name``."""
    available = mne.channels.get_builtin_montages()
    renamed = _RENAMED_MONTAGES.get(name)
    if renamed is not None and renamed in available:
        return renamed
    return name


def standard_montage(name: str = DEFAULT_MONTAGE) -> mne.channels.DigMontage:
    """MNE's built-in montage ``name`` (old names translated, see :func:`builtin_montage_name`)."""
    return mne.channels.make_standard_montage(builtin_montage_name(name))


@lru_cache(maxsize=64)
def _cached_positions(ch_names: tuple[str, ...], montage: str) -> np.ndarray:
    info = mne.create_info(list(ch_names), 1.0, "eeg")
    # Names are matched without regard to case ("CZ" is Cz); names the montage lacks stay NaN.
    info.set_montage(standard_montage(montage), match_case=False, on_missing="ignore", verbose="error")
    positions = np.array([channel["loc"][:3] for channel in info["chs"]], dtype=float)
    positions.setflags(write=False)
    return positions


def montage_positions(ch_names: tuple[str, ...] | list[str], montage: str = DEFAULT_MONTAGE) -> np.ndarray:
    """Positions of ``ch_names`` in MNE's montage ``montage``.

    Returns an array, shape (n_channels, 3), in m (head coordinates), NaN for names the
    montage does not have.
    """
    return _cached_positions(tuple(ch_names), montage).copy()


def epoch_set_positions(epochs: EpochSet, montage: str = DEFAULT_MONTAGE) -> np.ndarray:
    """Positions of the channels of ``epochs``, shape (n_channels, 3), in m, NaN where unknown.

    A channel's own position (from the file) is preferred; channels without one get the
    montage position of their name.
    """
    looked_up = montage_positions(epochs.ch_names, montage)
    if epochs.positions is None:
        return looked_up
    own = np.asarray(epochs.positions, dtype=float)
    return np.where(np.isfinite(own).all(axis=1, keepdims=True), own, looked_up)


def eeg_channels_without_position(meta: EpochSetMeta, montage: str = DEFAULT_MONTAGE) -> list[str]:
    """EEG channels of ``meta`` whose position neither the file nor the montage can give.

    Metadata only says whether the file has positions at all; when it has, they are
    trusted here, and a channel the file leaves without one is looked up when the data
    arrive.
    """
    if meta.has_positions:
        return []
    eeg = [name for name, kind in zip(meta.ch_names, meta.ch_types, strict=False) if kind in SCORED_CHANNEL_TYPES]
    positions = montage_positions(eeg, montage)
    return [name for name, known in zip(eeg, np.isfinite(positions).all(axis=1), strict=False) if not known]


def missing_positions_error(
    loc: tuple[str | int, ...], needed_by: str, unplaced: list[str], alternative: str
) -> SpecError:
    """The refusal of a step that needs electrode positions some channels lack.

    ``needed_by`` names what needs them (e.g. "interpolation"); ``alternative`` is the
    choice that works without positions (e.g. "kind 'average'").
    """
    return SpecError(
        loc,
        f"{needed_by} needs electrode positions, and channel(s) {', '.join(unplaced)} have none in the file nor "
        "under their name in the standard 10-20 montage; upload positions with the epoch set, rename the "
        f"channels to 10-20 names, or choose {alternative}",
    )
