"""Reading NPZ epoch-set files: round trip, safety limits and every malformed case."""

import io
import zipfile
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from numpy.lib import format as npy_format

from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io import read_npz, write_npz
from tests.engine.conftest import random_epoch_set

LIMIT_BYTES = 10**7
N_TRIALS, N_CHANNELS, N_TIMES = 6, 4, 20
CH_NAMES = ("Fz", "Cz", "Pz", "Oz")


def _valid_arrays() -> dict[str, Any]:
    rng = np.random.default_rng(3)
    return {
        "data": 1e-5 * rng.standard_normal((N_TRIALS, N_CHANNELS, N_TIMES)),
        "sfreq": np.float64(250.0),
        "tmin": np.float64(-0.2),
        "ch_names": np.array(CH_NAMES),
        "labels": np.array(["std", "dev"] * (N_TRIALS // 2)),
    }


def _save(tmp_path: Path, **changes: Any) -> Path:
    """An NPZ file with the valid arrays, some replaced (None removes a key)."""
    arrays = {key: value for key, value in {**_valid_arrays(), **changes}.items() if value is not None}
    path = tmp_path / "epochs.npz"
    np.savez(path, **arrays)
    return path


def _npy_bytes(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array)
    return buffer.getvalue()


def _zip(tmp_path: Path, members: dict[str, bytes]) -> Path:
    path = tmp_path / "handmade.npz"
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_STORED) as archive:
        for name, content in members.items():
            archive.writestr(name, content)
    return path


def _valid_members_except(key: str) -> dict[str, bytes]:
    return {f"{k}.npy": _npy_bytes(np.asarray(v)) for k, v in _valid_arrays().items() if k != key}


def _format_error(path: Path) -> EpochSetFormatError:
    with pytest.raises(EpochSetFormatError) as caught:
        read_npz(path, max_array_bytes=LIMIT_BYTES)
    return caught.value


def test_round_trip_with_write_npz(tmp_path: Path) -> None:
    epochs = random_epoch_set(n_channels=3, ch_types=("eeg", "eog", "misc"), tmin=-0.2, sfreq=250.0)
    write_npz(epochs, tmp_path / "epochs.npz")
    read = read_npz(tmp_path / "epochs.npz", max_array_bytes=LIMIT_BYTES)
    np.testing.assert_array_equal(read.data, epochs.data)
    assert (read.sfreq, read.tmin, read.ch_names, read.ch_types) == (250.0, -0.2, epochs.ch_names, epochs.ch_types)
    np.testing.assert_array_equal(read.labels, epochs.labels)
    assert read.labels.dtype.kind == "U"
    assert read.positions is None and read.bads == frozenset()


def test_float32_data_is_returned_as_float64(tmp_path: Path) -> None:
    data = _valid_arrays()["data"].astype(np.float32)
    read = read_npz(_save(tmp_path, data=data), max_array_bytes=LIMIT_BYTES)
    assert read.data.dtype == np.float64
    np.testing.assert_array_equal(read.data, data.astype(np.float64))


def test_microvolt_data_are_converted_to_volts(tmp_path: Path) -> None:
    data_uv = 1e6 * _valid_arrays()["data"]
    read = read_npz(_save(tmp_path, data=data_uv, unit=np.array("uV")), max_array_bytes=LIMIT_BYTES)
    np.testing.assert_allclose(read.data, data_uv * 1e-6, rtol=1e-15)


def test_missing_channel_types_default_to_eeg(tmp_path: Path) -> None:
    assert read_npz(_save(tmp_path), max_array_bytes=LIMIT_BYTES).ch_types == ("eeg",) * N_CHANNELS


def test_file_declaring_a_huge_shape_is_refused_before_loading(tmp_path: Path) -> None:
    header = io.BytesIO()
    shape = (10**6, 64, 1000)
    npy_format.write_array_header_1_0(header, {"descr": "<f8", "fortran_order": False, "shape": shape})
    path = _zip(tmp_path, {**_valid_members_except("data"), "data.npy": header.getvalue()})
    with pytest.raises(EpochSetTooLargeError) as caught:
        read_npz(path, max_array_bytes=LIMIT_BYTES)
    assert caught.value.declared_bytes >= 8 * 10**6 * 64 * 1000
    assert caught.value.limit_bytes == LIMIT_BYTES


def test_member_shorter_than_its_header_declares_is_refused(tmp_path: Path) -> None:
    header = io.BytesIO()
    npy_format.write_array_header_1_0(header, {"descr": "<f8", "fortran_order": False, "shape": (6, 4, 20)})
    path = _zip(tmp_path, {**_valid_members_except("data"), "data.npy": header.getvalue() + bytes(80)})
    error = _format_error(path)
    assert error.field == "file"
    assert "data.npy is truncated" in error.problem and "holds 80 bytes" in error.problem


def test_file_that_is_not_a_zip_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "epochs.npz"
    path.write_bytes(b"trial,channel,value\n1,Cz,0.1\n")
    error = _format_error(path)
    assert error.field == "file" and "not a readable NPZ (zip) archive" in error.problem


def test_truncated_zip_is_refused(tmp_path: Path) -> None:
    path = _save(tmp_path)
    path.write_bytes(path.read_bytes()[:-200])
    error = _format_error(path)
    assert error.field == "file" and "not a readable NPZ" in error.problem


def test_member_with_corrupted_bytes_is_refused(tmp_path: Path) -> None:
    path = _save(tmp_path)
    content = bytearray(path.read_bytes())
    offset = content.find(_valid_arrays()["data"].tobytes()[:32])
    content[offset + 5] ^= 0xFF
    path.write_bytes(bytes(content))
    error = _format_error(path)
    assert error.field == "file" and "checksum is damaged" in error.problem  # zipfile found a bad CRC-32


def test_member_that_is_not_an_npy_array_is_refused(tmp_path: Path) -> None:
    path = _zip(tmp_path, {**_valid_members_except("sfreq"), "sfreq.npy": b"250 Hz"})
    error = _format_error(path)
    assert error.field == "file" and "sfreq.npy is not a valid .npy array" in error.problem


def test_unknown_keys_are_refused_by_name(tmp_path: Path) -> None:
    error = _format_error(_save(tmp_path, events=np.arange(3), notes=np.array("x")))
    assert error.field == "events"
    assert "unknown key(s) 'events', 'notes'" in error.problem


def test_missing_required_key_is_refused(tmp_path: Path) -> None:
    error = _format_error(_save(tmp_path, labels=None))
    assert error.field == "labels" and "no 'labels' array" in error.problem


def test_object_arrays_are_refused_without_unpickling(tmp_path: Path) -> None:
    error = _format_error(_save(tmp_path, labels=np.array(["std", "dev"] * 3, dtype=object)))
    assert error.field == "labels" and "Python objects" in error.problem


def test_non_finite_values_are_counted_and_located(tmp_path: Path) -> None:
    data = _valid_arrays()["data"]
    data[4, 2, 7] = np.nan
    data[1, 2, 3] = np.inf
    data[0, 3, 0] = np.nan
    error = _format_error(_save(tmp_path, data=data))
    assert error.field == "data"
    assert "3 NaN or infinite value(s)" in error.problem
    assert "first channel with one is 'Pz' (trial 1)" in error.problem


def test_data_in_microvolts_declared_as_volts_is_refused(tmp_path: Path) -> None:
    data_uv = 1e6 * _valid_arrays()["data"]
    median_std = np.median(data_uv.std(axis=(0, 2)))  # by hand: per-channel SD over trials and samples
    error = _format_error(_save(tmp_path, data=data_uv))
    assert error.field == "data"
    assert f"the median channel standard deviation is {median_std:.1e} V" in error.problem
    assert "implausible for EEG in volts (expected roughly 1e-06 to 1e-04 V)" in error.problem
    assert error.fix == "If the data are in microvolts, add unit='uV'"


def test_data_in_volts_declared_as_microvolts_is_refused(tmp_path: Path) -> None:
    error = _format_error(_save(tmp_path, unit=np.array("uV")))
    assert error.field == "data"
    assert "implausible for EEG in microvolts" in error.problem
    assert "unit='V'" in error.fix


def _duplicated_names() -> np.ndarray:
    return np.array(["Fz", "Cz", "Fz", "Cz"])


MALFORMED = [
    ("data-rank", {"data": np.zeros((N_TRIALS, N_CHANNELS))}, "data", "3 are needed"),
    ("data-dtype", {"data": np.zeros((N_TRIALS, N_CHANNELS, N_TIMES), dtype=np.int32)}, "data", "dtype int32"),
    ("data-one-sample", {"data": np.zeros((N_TRIALS, N_CHANNELS, 1))}, "data", "1 sample(s) per epoch"),
    ("data-no-trials", {"data": np.zeros((0, N_CHANNELS, N_TIMES))}, "data", "no trials"),
    ("data-no-channels", {"data": np.zeros((N_TRIALS, 0, N_TIMES))}, "data", "no channels"),
    ("sfreq-zero", {"sfreq": np.float64(0.0)}, "sfreq", "is 0, not a positive frequency"),
    ("sfreq-negative", {"sfreq": np.float64(-250.0)}, "sfreq", "is -250, not a positive frequency"),
    ("sfreq-infinite", {"sfreq": np.float64(np.inf)}, "sfreq", "not a finite number"),
    ("sfreq-array", {"sfreq": np.array([250.0, 250.0])}, "sfreq", "must be a single number"),
    ("tmin-nan", {"tmin": np.float64(np.nan)}, "tmin", "not a finite number"),
    ("tmin-text", {"tmin": np.array("-0.2")}, "tmin", "must be a single number"),
    ("labels-count", {"labels": np.array(["std"] * 5)}, "labels", "has 5 entries but data has 6 trials"),
    ("labels-empty", {"labels": np.array(["std", "", "dev", "std", "dev", "std"])}, "labels", "empty entry"),
    ("labels-numbers", {"labels": np.arange(N_TRIALS)}, "labels", "1-D array of strings"),
    ("ch-names-duplicated", {"ch_names": _duplicated_names()}, "ch_names", "'Cz', 'Fz' appear more than once"),
    ("ch-names-empty", {"ch_names": np.array(["Fz", " ", "Pz", "Oz"])}, "ch_names", "empty entry"),
    ("ch-names-count", {"ch_names": np.array(["Fz", "Cz"])}, "ch_names", "has 2 entries but data has 4 channels"),
    ("ch-types-count", {"ch_types": np.array(["eeg"] * 3)}, "ch_types", "has 3 entries"),
    ("ch-types-value", {"ch_types": np.array(["eeg", "ecg", "eeg", "stim"])}, "ch_types", "'ecg'"),
    ("ch-types-no-eeg", {"ch_types": np.array(["misc"] * 4)}, "ch_types", "no channel as 'eeg'"),
    ("unit-value", {"unit": np.array("mV")}, "unit", "is 'mV'; it must be one of 'V', 'uV'"),
    ("unit-array", {"unit": np.array(["V", "V"])}, "unit", "an array of shape (2,)"),
]


@pytest.mark.parametrize(
    ("changes", "field", "fragment"), [case[1:] for case in MALFORMED], ids=[case[0] for case in MALFORMED]
)
def test_malformed_field_is_refused_with_its_name(tmp_path: Path, changes: dict, field: str, fragment: str) -> None:
    error = _format_error(_save(tmp_path, **changes))
    assert error.field == field
    assert fragment in error.problem
    assert error.fix


def test_per_trial_arrays_are_kept_with_the_trials_and_written_back(tmp_path: Path) -> None:
    onsets = np.arange(N_TRIALS) * 1.5
    ids = np.array([f"t{i:03d}" for i in range(N_TRIALS)])
    epochs = read_npz(_save(tmp_path, trial_onset_s=onsets, trial_id=ids), max_array_bytes=LIMIT_BYTES)
    np.testing.assert_array_equal(epochs.trial_arrays["trial_onset_s"], onsets)
    written = tmp_path / "again.npz"
    write_npz(epochs, written)
    np.testing.assert_array_equal(read_npz(written, max_array_bytes=LIMIT_BYTES).trial_arrays["trial_id"], ids)


def test_a_per_trial_array_of_the_wrong_length_is_refused(tmp_path: Path) -> None:
    error = _format_error(_save(tmp_path, trial_rt_s=np.ones(N_TRIALS + 1)))
    assert error.field == "trial_rt_s" and f"({N_TRIALS} entries)" in error.fix


def test_repeated_trial_ids_are_refused(tmp_path: Path) -> None:
    error = _format_error(_save(tmp_path, trial_id=np.zeros(N_TRIALS, dtype=int)))
    assert error.field == "trial_id" and "more than once" in error.problem


def test_an_unknown_key_is_refused_with_the_accepted_keys_and_the_trial_prefix(tmp_path: Path) -> None:
    error = _format_error(_save(tmp_path, onsets=np.arange(N_TRIALS)))
    assert "trial_<name>" in error.fix and "ch_types" in error.fix
