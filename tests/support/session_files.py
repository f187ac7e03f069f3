"""Recordings written by writers the project did not write, for the inputs of issue 16.

* VHDR sets by pybv (Appelhoff, Stenner et al., pybv, https://pypi.org/project/pybv/),
  the maintained VHDR writer.
* Raw FIF files by MNE-Python (``mne.io.RawArray.save``; Gramfort et al., 2013).
* BDF files with a ``Status`` trigger channel, written byte by byte to the published layout:
  the EDF header (Kemp et al., 1992, Table 1) with the BDF format's maker's BDF changes (the BDF format's maker, "BDF file
  format", bdf.com/faq/file_format.htm; recalled from memory): the version field is byte
  255 then "BDF", the reserved field says "24BIT", samples are 24-bit little-endian
  two's complement, and the trigger codes sit in the low 16 bits of the ``Status`` signal.
"""

from pathlib import Path

import mne
import numpy as np
import pybv

from tests.support.recording_files import KnownRecording

EEG_NAMES = ("Fz", "Cz", "Pz")
BDF_DIGITAL = (-8388608, 8388607)
BDF_PHYSICAL_UV = (-500.0, 500.0)


def event_samples(known: KnownRecording) -> np.ndarray:
    """Each event's sample, shape (n_events,)."""
    return np.round(np.array(known.onset_s) * known.sfreq).astype(int)


def event_codes(known: KnownRecording) -> np.ndarray:
    """Trigger code of each event: 1 for 'a', 2 for 'b'."""
    return np.array([1 if value == "a" else 2 for value in known.values])


def write_brainvision(known: KnownRecording, folder: Path, name: str = "rec") -> dict[str, Path]:
    """The EEG channels of ``known`` as a pybv VHDR set, events as markers "Stimulus/S  1" and "S  2"."""
    events = np.column_stack([event_samples(known), event_codes(known)])
    pybv.write_brainvision(
        data=known.signal_v[: len(EEG_NAMES)],  # pybv takes volts and stores the given unit
        sfreq=known.sfreq,
        ch_names=list(EEG_NAMES),
        fname_base=name,
        folder_out=str(folder),
        events=events,
        unit="µV",
        overwrite=True,
    )
    return {suffix: folder / f"{name}.{suffix}" for suffix in ("vhdr", "eeg", "vmrk")}


def write_raw_fif(known: KnownRecording, path: Path, first_samp: int = 0) -> Path:
    """The EEG channels of ``known`` and a trigger channel 'STI 014' (codes 1/2 for 0.05 s) saved by MNE."""
    stim = np.zeros(known.signal_v.shape[1])
    width = round(0.05 * known.sfreq)
    for sample, code in zip(event_samples(known), event_codes(known), strict=True):
        stim[sample : sample + width] = code
    info = mne.create_info([*EEG_NAMES, "STI 014"], known.sfreq, ["eeg"] * len(EEG_NAMES) + ["stim"])
    raw = mne.io.RawArray(
        np.vstack([known.signal_v[: len(EEG_NAMES)], stim]), info, first_samp=first_samp, verbose="error"
    )
    raw.save(path, overwrite=True, verbose="error")
    return path


def status_words(known: KnownRecording, high_bits: int = 0) -> np.ndarray:
    """A BDF Status signal: trigger code in the low 16 bits for 0.05 s per event, ``high_bits`` always set."""
    words = np.full(known.signal_v.shape[1], high_bits, dtype=np.int64)
    width = round(0.05 * known.sfreq)
    for sample, code in zip(event_samples(known), event_codes(known), strict=True):
        words[sample : sample + width] = high_bits | code
    return words


def bdf_bytes(known: KnownRecording, status: np.ndarray, record_seconds: int = 1) -> bytes:
    """``known``'s EEG channels and a ``Status`` signal as a BDF file, written byte by byte (module docstring)."""
    samples_per_record = round(known.sfreq * record_seconds)
    n_records = known.signal_v.shape[1] // samples_per_record
    n_samples = n_records * samples_per_record
    low, high = BDF_DIGITAL
    phys_low, phys_high = BDF_PHYSICAL_UV
    scale = (high - low) / (phys_high - phys_low)
    eeg = np.round((known.signal_v[: len(EEG_NAMES), :n_samples] * 1e6 - phys_low) * scale + low).astype(np.int64)
    signals = np.vstack([eeg, status[np.newaxis, :n_samples]])
    labels = [*EEG_NAMES, "Status"]
    n_signals = len(labels)

    def field(text: object, width: int) -> bytes:
        return str(text).ljust(width).encode("ascii")[:width]

    header = b"\xffBIOSEMI" + field("X X X X", 80) + field("Startdate X X X X", 80)
    header += field("01.01.25", 8) + field("00.00.00", 8) + field(256 * (n_signals + 1), 8)
    header += field("24BIT", 44) + field(n_records, 8) + field(record_seconds, 8) + field(n_signals, 4)
    columns = {
        "label": (16, labels),
        "transducer": (80, ["AgCl electrode"] * len(EEG_NAMES) + ["Triggers and Status"]),
        "dimension": (8, ["uV"] * len(EEG_NAMES) + ["Boolean"]),
        "physical_min": (8, [phys_low] * len(EEG_NAMES) + [low]),
        "physical_max": (8, [phys_high] * len(EEG_NAMES) + [high]),
        "digital_min": (8, [low] * n_signals),
        "digital_max": (8, [high] * n_signals),
        "prefilter": (80, ["HP:DC; LP:417 Hz"] * len(EEG_NAMES) + ["No filtering"]),
        "samples": (8, [samples_per_record] * n_signals),
        "reserved": (32, [""] * n_signals),
    }
    for width, values in columns.values():
        header += b"".join(field(value, width) for value in values)
    # Records: each signal's samples of the record in turn, 3 bytes each, little-endian two's complement.
    unsigned = (signals & 0xFFFFFF).astype("<u4").reshape(n_signals, n_records, samples_per_record)
    body = unsigned.transpose(1, 0, 2).reshape(-1).view(np.uint8).reshape(-1, 4)[:, :3].tobytes()
    return header + body
