"""The one in-memory epoch-set type that every step takes and returns."""

from collections import Counter
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

SCORED_CHANNEL_TYPES = ("eeg",)
CHANNEL_TYPES = ("eeg", "eog", "misc", "stim")
# Per-trial arrays an upload may carry are named with this prefix; TRIAL_ID_KEY names each trial.
TRIAL_ARRAY_PREFIX = "trial_"
TRIAL_ID_KEY = "trial_id"


@dataclass(frozen=True)
class EpochSetMeta:
    """What a spec needs to know about an epoch set to be checked, without its data.

    The service builds one from a stored epoch set to refuse impossible specs at run
    creation; each step's ``check`` returns the meta of its output.
    """

    sfreq: float
    tmin: float
    n_times: int
    ch_names: tuple[str, ...]
    ch_types: tuple[str, ...]
    condition_counts: dict[str, int]
    has_positions: bool = False
    # Channels marked bad; empty where unknown (the service does not store them with an epoch set).
    bads: frozenset[str] = frozenset()

    @property
    def tmax(self) -> float:
        """Time of the last sample, in s."""
        return self.tmin + (self.n_times - 1) / self.sfreq

    @property
    def nyquist(self) -> float:
        """Half the sampling frequency, in Hz."""
        return self.sfreq / 2.0


@dataclass(frozen=True)
class EpochSet:
    """Epoched EEG with a condition label per trial.

    Parameters
    ----------
    data : array, shape (n_trials, n_channels, n_times), in V
    sfreq : sampling frequency, in Hz
    tmin : time of the first sample relative to the event, in s
    ch_names : one unique name per channel
    ch_types : one of ``CHANNEL_TYPES`` per channel
    labels : array of str, shape (n_trials,), the condition of each trial
    positions : array, shape (n_channels, 3), in m (head coordinates), NaN where unknown;
        None when no channel has a position
    bads : names of channels flagged bad (left out of references and scoring)
    trial_arrays : per-trial arrays kept from the file (key → array, shape (n_trials,)),
        such as ``trial_id``; they follow the trials when trials are removed
    """

    data: np.ndarray
    sfreq: float
    tmin: float
    ch_names: tuple[str, ...]
    ch_types: tuple[str, ...]
    labels: np.ndarray
    positions: np.ndarray | None = None
    bads: frozenset[str] = field(default_factory=frozenset)
    trial_arrays: dict[str, np.ndarray] = field(default_factory=dict)

    def __post_init__(self) -> None:
        n_trials, n_channels, _ = self.data.shape
        if len(self.ch_names) != n_channels or len(self.ch_types) != n_channels:
            raise ValueError("ch_names and ch_types must have one entry per channel")
        if self.labels.shape != (n_trials,):
            raise ValueError("labels must have one entry per trial")
        if any(array.shape != (n_trials,) for array in self.trial_arrays.values()):
            raise ValueError("every trial array must have one entry per trial")

    @property
    def n_trials(self) -> int:
        return int(self.data.shape[0])

    @property
    def n_channels(self) -> int:
        return int(self.data.shape[1])

    @property
    def n_times(self) -> int:
        return int(self.data.shape[2])

    @property
    def times(self) -> np.ndarray:
        """Sample times, shape (n_times,), in s."""
        return self.tmin + np.arange(self.n_times) / self.sfreq

    def condition_counts(self) -> dict[str, int]:
        """Number of trials per condition label."""
        return dict(sorted(Counter(self.labels.tolist()).items()))

    def channel_indices(self, names: list[str] | tuple[str, ...]) -> np.ndarray:
        """Indices of ``names`` in ``ch_names``; raises KeyError for a missing name."""
        lookup = {name: i for i, name in enumerate(self.ch_names)}
        return np.array([lookup[name] for name in names], dtype=int)

    def picks(self, types: tuple[str, ...] = SCORED_CHANNEL_TYPES, *, exclude_bads: bool = True) -> np.ndarray:
        """Indices of channels of the given types, bad channels left out unless asked."""
        return np.array(
            [
                i
                for i, (name, kind) in enumerate(zip(self.ch_names, self.ch_types, strict=False))
                if kind in types and not (exclude_bads and name in self.bads)
            ],
            dtype=int,
        )

    def meta(self) -> EpochSetMeta:
        return EpochSetMeta(
            sfreq=self.sfreq,
            tmin=self.tmin,
            n_times=self.n_times,
            ch_names=self.ch_names,
            ch_types=self.ch_types,
            condition_counts=self.condition_counts(),
            has_positions=self.positions is not None and bool(np.isfinite(self.positions).all(axis=1).any()),
            bads=self.bads,
        )

    def select_trials(self, keep: np.ndarray) -> "EpochSet":
        """The trials where ``keep`` (bool, shape (n_trials,)) is true, with their labels and trial arrays."""
        return self.with_changes(
            data=self.data[keep],
            labels=self.labels[keep],
            trial_arrays={key: array[keep] for key, array in self.trial_arrays.items()},
        )

    def with_changes(self, **changes: Any) -> "EpochSet":
        """A copy with some fields replaced (the data array is not copied)."""
        return replace(self, **changes)
