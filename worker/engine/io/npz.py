"""The NPZ epoch-set file: see the README section "Epoch-set file (NPZ)"."""

from pathlib import Path

import numpy as np

from worker.engine.epochs import EpochSet


def write_npz(epochs: EpochSet, path: Path) -> None:
    """Write ``epochs`` as an NPZ epoch-set file (data in V, unit "V")."""
    with open(path, "wb") as handle:
        np.savez(
            handle,
            data=epochs.data,
            sfreq=np.float64(epochs.sfreq),
            tmin=np.float64(epochs.tmin),
            ch_names=np.array(epochs.ch_names, dtype=str),
            ch_types=np.array(epochs.ch_types, dtype=str),
            labels=np.asarray(epochs.labels, dtype=str),
            unit=np.array("V"),
        )
