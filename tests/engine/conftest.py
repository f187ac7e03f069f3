"""Small seeded epoch sets for engine tests."""

from collections.abc import Callable

import numpy as np
import pytest

from epoch_assay.engine.epochs import EpochSet

RandomEpochs = Callable[..., EpochSet]


def random_epoch_set(
    *,
    n_trials: int = 6,
    n_channels: int = 4,
    n_times: int = 50,
    sfreq: float = 100.0,
    tmin: float = -0.1,
    ch_names: tuple[str, ...] | None = None,
    ch_types: tuple[str, ...] | None = None,
    bads: frozenset[str] = frozenset(),
    scale_v: float = 1e-5,
    seed: int = 0,
) -> EpochSet:
    """Gaussian noise epochs, data in V with standard deviation ``scale_v``, labels alternating 'a'/'b'."""
    rng = np.random.default_rng(seed)
    return EpochSet(
        data=scale_v * rng.standard_normal((n_trials, n_channels, n_times)),
        sfreq=sfreq,
        tmin=tmin,
        ch_names=ch_names or tuple(f"E{i}" for i in range(n_channels)),
        ch_types=ch_types or ("eeg",) * n_channels,
        labels=np.array(["a", "b"] * (n_trials // 2) + ["a"] * (n_trials % 2)),
        bads=bads,
    )


@pytest.fixture
def random_epochs() -> RandomEpochs:
    """Factory of small seeded random epoch sets; see :func:`random_epoch_set`."""
    return random_epoch_set
