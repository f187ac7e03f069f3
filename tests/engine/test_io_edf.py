"""EDF+ and BDF+ files written by pyedflib, read back by the engine."""

from pathlib import Path

import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.detect import FileFormat
from epoch_assay.engine.io.edf import read_continuous
from epoch_assay.engine.recording import ChannelSpec, EpochingSpec, epoch_recording, load_recording
from tests.support.recording_files import known_recording, quantisation_step_v, recording_bytes

LIMIT = 10**9


def _write(tmp_path: Path, content: bytes, name: str = "blob") -> Path:
    path = tmp_path / name
    path.write_bytes(content)
    return path


@pytest.mark.parametrize("kind", ["edf", "bdf"])
def test_signals_read_back_equal_the_written_ones_within_one_digital_step(tmp_path, kind):
    # Reference: pyedflib writes the file (EDFlib, van Beelen); EDF quantisation is one digital step,
    # (physical_max - physical_min) / (digital_max - digital_min): 1000 uV / 65535 for EDF, / 16777215 for BDF.
    known = known_recording()
    read = read_continuous(_write(tmp_path, recording_bytes(known, kind)), FileFormat(kind), max_array_bytes=LIMIT)
    np.testing.assert_allclose(read.recording.data[0], known.signal_v, rtol=0, atol=quantisation_step_v(kind))
    assert read.recording.ch_names == ("Fz", "Cz", "Pz", "L")
    assert read.recording.ch_types == ("eeg", "eeg", "eeg", "eog")
    assert read.recording.sfreq == known.sfreq


@pytest.mark.parametrize("kind", ["edf", "bdf"])
def test_annotations_are_read_as_events(tmp_path, kind):
    known = known_recording()
    read = read_continuous(_write(tmp_path, recording_bytes(known, kind)), FileFormat(kind), max_array_bytes=LIMIT)
    np.testing.assert_allclose(read.annotations.onset_s, known.onset_s, atol=1e-3)
    assert tuple(read.annotations.values.tolist()) == known.values


@pytest.mark.parametrize("kind", ["edf", "bdf"])
def test_epochs_equal_the_known_signal_around_each_event(tmp_path, kind):
    known = known_recording()
    source = load_recording(
        _write(tmp_path, recording_bytes(known, kind)),
        None,
        EpochingSpec(tmin=-0.2, tmax=0.5, conditions={"A": ["a"], "B": ["b"]}),
        ChannelSpec(),
        max_array_bytes=LIMIT,
    )
    epochs = epoch_recording(source.recording, source.runs[0].events, source.epoching)
    starts = [round(onset * known.sfreq) - 20 for onset in known.onset_s]
    expected = np.stack([known.signal_v[:, start : start + 71] for start in starts])
    np.testing.assert_allclose(epochs.data, expected, rtol=0, atol=quantisation_step_v(kind))
    assert epochs.labels.tolist() == ["A" if value == "a" else "B" for value in known.values]
    assert epochs.tmin == pytest.approx(-0.2)


def test_a_truncated_file_is_refused_naming_the_declared_and_found_sizes(tmp_path):
    content = recording_bytes(known_recording(), "edf")
    with pytest.raises(EpochSetFormatError, match="truncated"):
        read_continuous(_write(tmp_path, content[:-100]), FileFormat.EDF, max_array_bytes=LIMIT)


def test_a_header_cut_short_is_refused_as_truncated(tmp_path):
    with pytest.raises(EpochSetFormatError, match="truncated"):
        read_continuous(
            _write(tmp_path, recording_bytes(known_recording(), "bdf")[:300]), FileFormat.BDF, max_array_bytes=LIMIT
        )


def test_signals_at_different_rates_are_refused(tmp_path):
    content = bytearray(recording_bytes(known_recording(), "edf"))
    n_signals = int(content[252:256].decode())
    # Samples-per-record fields follow 216 bytes per signal of earlier fields (Kemp et al., 1992).
    offset = 256 + 216 * n_signals
    first = content[offset : offset + 8].decode().strip()
    content[offset : offset + 8] = str(int(first) // 2).ljust(8).encode()
    with pytest.raises(EpochSetFormatError, match="different rates"):
        read_continuous(_write(tmp_path, bytes(content)), FileFormat.EDF, max_array_bytes=LIMIT)


def test_a_recording_larger_than_the_memory_limit_is_refused_from_its_header(tmp_path):
    with pytest.raises(EpochSetTooLargeError):
        read_continuous(
            _write(tmp_path, recording_bytes(known_recording(), "edf")), FileFormat.EDF, max_array_bytes=1000
        )


def test_a_header_with_text_where_a_number_belongs_is_refused(tmp_path):
    content = bytearray(recording_bytes(known_recording(), "edf"))
    content[236:244] = b"many    "
    with pytest.raises(EpochSetFormatError, match="number of data records"):
        read_continuous(_write(tmp_path, bytes(content)), FileFormat.EDF, max_array_bytes=LIMIT)
