"""Conversions between an EpochSet and MNE objects, for steps that use MNE as a library.

MNE's own logging is silenced inside the engine: what a step did goes into its
provenance record, not into the worker's log.
"""

import mne
import numpy as np

from epoch_assay.engine.epochs import EpochSet

MNE_QUIET = "error"


def mne_info(epochs: EpochSet, picks: np.ndarray, positions: np.ndarray | None = None) -> mne.Info:
    """MNE info of the channels ``picks`` of ``epochs``, with their positions when given.

    positions : array, shape (n_channels, 3), in m (head coordinates), for all channels of
        ``epochs``; rows of ``picks`` must be finite.
    """
    names = [epochs.ch_names[i] for i in picks]
    info = mne.create_info(names, epochs.sfreq, [epochs.ch_types[i] for i in picks], verbose=MNE_QUIET)
    if positions is not None:
        montage = mne.channels.make_dig_montage(
            ch_pos={name: positions[i] for name, i in zip(names, picks, strict=False)}, coord_frame="head"
        )
        info.set_montage(montage, on_missing="ignore", verbose=MNE_QUIET)
    info["bads"] = [name for name in names if name in epochs.bads]
    return info


def to_mne_epochs(epochs: EpochSet, picks: np.ndarray, positions: np.ndarray | None = None) -> mne.EpochsArray:
    """The channels ``picks`` of ``epochs`` as an MNE EpochsArray (data copied, in V)."""
    return mne.EpochsArray(
        np.array(epochs.data[:, picks], dtype=np.float64),
        mne_info(epochs, picks, positions),
        tmin=epochs.tmin,
        baseline=None,
        verbose=MNE_QUIET,
    )
