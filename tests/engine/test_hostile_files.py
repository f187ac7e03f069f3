"""Engine readers bound what an untrusted file may cost before they spend it."""

import numpy as np
import pytest

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import EpochSetFormatError, EpochSetTooLargeError
from epoch_assay.engine.io.events import MAX_EVENTS, events_from_lists
from epoch_assay.engine.io.json_epochs import parse_json_epochs
from epoch_assay.engine.io.npz import MAX_MEMBERS, read_npz
from epoch_assay.engine.recording import EpochingSpec, check_epochs_size, plan_epochs
from tests.corpus import npz_files
from tests.corpus.specs import SPECS


def _write(tmp_path, content: bytes):
    path = tmp_path / "upload"
    path.write_bytes(content)
    return path


def test_an_archive_of_more_members_than_keys_is_refused_from_its_end_record(tmp_path):
    path = _write(tmp_path, npz_files.many_members(16_000))
    with pytest.raises(
        EpochSetFormatError, match=f"declares 16000 members; an epoch-set file has at most {MAX_MEMBERS}"
    ):
        read_npz(path, max_array_bytes=10**9)


def test_repeated_keys_are_found_in_one_pass(tmp_path):
    path = _write(tmp_path, npz_files.many_members(3, name="data.npy"))
    with pytest.raises(EpochSetFormatError, match="more than one member for key"):
        read_npz(path, max_array_bytes=10**9)


def test_arrays_declaring_far_more_than_the_file_holds_are_refused_before_loading(tmp_path):
    path = _write(tmp_path, npz_files.declaring_zeros(shape=(10, 8, 16384)))  # 10 MiB of zeros in a few KiB
    with pytest.raises(EpochSetFormatError, match="more than 10 times is not read"):
        read_npz(path, max_array_bytes=10**9, max_compression_ratio=10.0)


def test_a_higher_ratio_lets_the_same_file_through_to_its_other_checks(tmp_path):
    path = _write(tmp_path, npz_files.declaring_zeros(shape=(10, 8, 16384)))
    with pytest.raises(EpochSetFormatError, match="median channel standard deviation"):  # zeros are not EEG
        read_npz(path, max_array_bytes=10**9, max_compression_ratio=10_000.0)


def test_more_annotations_than_events_allowed_are_refused():
    n = MAX_EVENTS + 1
    with pytest.raises(EpochSetFormatError, match=f"{n} annotations, more than {MAX_EVENTS}"):
        events_from_lists([1.0] * n, [0.0] * n, ["a"] * n)


def test_an_epoch_cut_larger_than_the_limit_is_refused_before_it_is_made():
    recording = EpochSet(
        data=np.zeros((1, 1, 360_000)),
        sfreq=100.0,
        tmin=0.0,
        ch_names=("Cz",),
        ch_types=("eeg",),
        labels=np.array(["r"]),
    )
    events = events_from_lists([0.5, 0.6], [0.0, 0.0], ["a", "b"])
    epoching = EpochingSpec(tmin=0.0, tmax=3500.0, conditions={"a": ["a"], "b": ["b"]})
    plan = plan_epochs(recording, events, epoching)
    # 2 epochs × 1 channel × 350,001 samples × 8 bytes = 5,600,016 bytes.
    with pytest.raises(EpochSetTooLargeError, match="5600016 bytes"):
        check_epochs_size(plan.labels.size, recording.n_channels, plan.n_times, max_array_bytes=5_600_015)
    check_epochs_size(plan.labels.size, recording.n_channels, plan.n_times, max_array_bytes=5_600_016)


@pytest.mark.parametrize("name", ["json-epochs-401-digit-sample.json", "json-epochs-401-digit-sfreq.json"])
def test_a_401_digit_integer_in_a_json_epoch_set_is_a_format_error(name):
    with pytest.raises(EpochSetFormatError, match="too large for a 64-bit float"):
        parse_json_epochs((SPECS / name).read_bytes())
