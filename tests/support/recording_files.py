"""Small EDF+/BDF+ recordings written with pyedflib (a maintained EDF writer), with known signals and events,
and MNE epochs files of the small test epoch sets.

pyedflib: Nahrstaedt & Lee-Messer, pyEDFlib (EDFlib by van Beelen), https://pypi.org/project/pyEDFlib/
"""

import tempfile
from dataclasses import dataclass
from pathlib import Path

import mne
import numpy as np
import pyedflib

from epoch_assay.engine.epochs import EpochSet

CHANNELS = ("EEG Fz", "EEG Cz", "EEG Pz", "EOG L")
PHYSICAL_RANGE_UV = (-500.0, 500.0)
DIGITAL_RANGE = {"edf": (-32768, 32767), "bdf": (-8388608, 8388607)}
FILE_TYPES = {"edf": pyedflib.FILETYPE_EDFPLUS, "bdf": pyedflib.FILETYPE_BDFPLUS}


def quantisation_step_v(kind: str) -> float:
    """One digital step in V: the physical range over the number of digital steps."""
    low, high = DIGITAL_RANGE[kind]
    return (PHYSICAL_RANGE_UV[1] - PHYSICAL_RANGE_UV[0]) / (high - low) * 1e-6


@dataclass(frozen=True)
class KnownRecording:
    """signal_v : array, shape (n_channels, n_samples), in V; onsets in s; values as written."""

    signal_v: np.ndarray
    sfreq: float
    onset_s: tuple[float, ...]
    values: tuple[str, ...]


def known_recording(
    seconds: float = 20.0, sfreq: float = 100.0, seed: int = 0, n_events: int = 16, effect_uv: float = 0.0
) -> KnownRecording:
    """Noise (10 µV) on four channels and events alternating 'a'/'b', 1 s apart from 2 s on.

    With ``effect_uv``, 'a' events are followed 0.3–0.5 s later by that shift on Cz and Pz.
    """
    rng = np.random.default_rng(seed)
    n_samples = round(seconds * sfreq)
    signal_uv = rng.normal(0.0, 10.0, size=(len(CHANNELS), n_samples))
    onsets = tuple(2.0 + i for i in range(n_events))
    values = tuple("a" if i % 2 == 0 else "b" for i in range(n_events))
    for onset, value in zip(onsets, values, strict=False):
        if value == "a":
            start = round((onset + 0.3) * sfreq)
            signal_uv[1:3, start : start + round(0.2 * sfreq) + 1] += effect_uv
    return KnownRecording(
        signal_v=np.clip(signal_uv, *PHYSICAL_RANGE_UV) * 1e-6, sfreq=sfreq, onset_s=onsets, values=values
    )


def recording_bytes(known: KnownRecording, kind: str, annotate: bool = True) -> bytes:
    """``known`` written as EDF+ or BDF+ (microvolts), its events as annotations when ``annotate``."""
    low, high = DIGITAL_RANGE[kind]
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / f"recording.{kind}"
        writer = pyedflib.EdfWriter(str(path), len(CHANNELS), file_type=FILE_TYPES[kind])
        writer.setSignalHeaders(
            [
                {
                    "label": name,
                    "dimension": "uV",
                    "sample_frequency": known.sfreq,
                    "physical_min": PHYSICAL_RANGE_UV[0],
                    "physical_max": PHYSICAL_RANGE_UV[1],
                    "digital_min": low,
                    "digital_max": high,
                }
                for name in CHANNELS
            ]
        )
        writer.writeSamples(list(known.signal_v * 1e6))
        if annotate:
            for onset, value in zip(known.onset_s, known.values, strict=False):
                writer.writeAnnotation(onset, -1, value)
        writer.close()
        return path.read_bytes()


def events_tsv(onset_s: tuple[float, ...], values: tuple[str, ...]) -> bytes:
    lines = ["onset\tduration\ttrial_type"] + [
        f"{onset}\t0\t{value}" for onset, value in zip(onset_s, values, strict=False)
    ]
    return ("\n".join(lines) + "\n").encode()


def mne_epochs_bytes(epochs: EpochSet, folder: Path) -> bytes:
    """``epochs`` saved by MNE as an epochs file (``mne.Epochs.save``), event ids named after the labels."""
    names = sorted(set(epochs.labels.tolist()))
    codes = np.array([names.index(label) + 1 for label in epochs.labels.tolist()])
    events = np.column_stack([np.arange(epochs.n_trials) * 200, np.zeros(epochs.n_trials, int), codes])
    info = mne.create_info(list(epochs.ch_names), epochs.sfreq, list(epochs.ch_types))
    path = folder / "epochs-epo.fif"
    mne.EpochsArray(
        epochs.data,
        info,
        events=events,
        event_id={name: i + 1 for i, name in enumerate(names)},
        tmin=epochs.tmin,
        verbose="error",
    ).save(path, overwrite=True, verbose="error")
    return path.read_bytes()
