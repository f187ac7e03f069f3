"""Hostile EDF files: malformed headers, and a small recording that asks for a huge epoching.

Header fields as in Kemp et al. (1992), "A simple format for exchange of digitized polygraphic
recordings", Electroencephalography and Clinical Neurophysiology 82: 391–393.
"""

import numpy as np

from tests.support.recording_files import KnownRecording, events_tsv, recording_bytes


def _field(text: str, width: int) -> bytes:
    return text.ljust(width)[:width].encode("ascii")


def header(
    *, n_signals: str = "1", n_records: str = "1", record_seconds: str = "1", samples: str = "100", extra: bytes = b""
) -> bytes:
    """An EDF header (256 bytes + 256 per declared signal, as far as given) with the fields as text."""
    fixed = (
        _field("0", 8)
        + _field("X X X X", 80)
        + _field("Startdate X X X X", 80)
        + _field("01.01.26", 8)
        + _field("00.00.00", 8)
        + _field("512", 8)
        + _field("", 44)
        + _field(n_records, 8)
        + _field(record_seconds, 8)
        + _field(n_signals, 4)
    )
    signal = (
        _field("EEG Cz", 16)
        + _field("", 80)
        + _field("uV", 8)
        + _field("-500", 8)
        + _field("500", 8)
        + _field("-32768", 8)
        + _field("32767", 8)
        + _field("", 80)
        + _field(samples, 8)
        + _field("", 32)
    )
    return fixed + signal + extra


def malformed_headers() -> dict[str, bytes]:
    """Named EDF files, each wrong in one header field or in its length."""
    return {
        "edf signal count not a number": header(n_signals="abc"),
        "edf signal count enormous": header(n_signals="9999"),
        "edf negative record count": header(n_records="-5") + bytes(200),
        "edf record count enormous": header(n_records="99999999") + bytes(200),
        "edf samples per record not a number": header(samples="1e999") + bytes(200),
        "edf record duration zero": header(record_seconds="0") + bytes(200),
        "edf truncated header": header()[:300],
        "edf header only": header(),
    }


def one_hour_recording() -> bytes:
    """One hour of four channels at 100 Hz written by pyedflib (about 2.9 MB)."""
    rng = np.random.default_rng(2)
    known = KnownRecording(
        signal_v=rng.normal(0.0, 1e-5, size=(4, 360_000)), sfreq=100.0, onset_s=(1.0,), values=("a",)
    )
    return recording_bytes(known, "edf", annotate=False)


def many_early_events(n_events: int = 20_000) -> bytes:
    """An events.tsv of ``n_events`` rows in the first 90 s, alternating 'a' and 'b'."""
    onsets = tuple(round(0.5 + 89.0 * index / n_events, 4) for index in range(n_events))
    return events_tsv(onsets, tuple("ab"[index % 2] for index in range(n_events)))


# Epochs from 0 to 3500 s after each event: 20,000 × 4 channels × 350,001 samples × 8 bytes ≈ 224 GB.
HUGE_EPOCHING = {"tmin": 0.0, "tmax": 3500.0, "conditions": {"a": ["a"], "b": ["b"]}}
