"""VHDR sets written by pybv, read as MNE reads them; headers that point elsewhere are refused."""

import mne
import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.detect import FileFormat, sniff
from epoch_assay.engine.io.session_files import SessionFiles, UploadedPart, group_runs
from epoch_assay.engine.io.vhdr_set import header_references
from epoch_assay.engine.recording import ChannelSpec, EpochingSpec, epoch_runs, load_session
from tests.support.recording_files import known_recording
from tests.support.session_files import write_brainvision

LIMIT = 1 << 28
EPOCHING = EpochingSpec(tmin=-0.2, tmax=0.6, conditions={"a": ["Stimulus/S  1"], "b": ["Stimulus/S  2"]})


def _parts(files: dict) -> list[UploadedPart]:
    return [UploadedPart(path, path.name) for path in files.values()]


def test_a_pybv_set_gives_the_epochs_mne_gives_from_the_same_files(tmp_path):
    files = write_brainvision(known_recording(seed=11, effect_uv=5.0), tmp_path)
    session = SessionFiles(runs=group_runs(_parts(files), []))
    source = load_session(session, EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)
    ours = epoch_runs([(run.recording, run.events) for run in source.runs], EPOCHING)
    # Reference: mne.io.read_raw_brainvision + mne.events_from_annotations + mne.Epochs (Gramfort et al.,
    # 2013, MNE-Python) on the files pybv wrote, no baseline.
    raw = mne.io.read_raw_brainvision(files["vhdr"], preload=True, verbose="error")
    events, ids = mne.events_from_annotations(raw, verbose="error")
    wanted = {"a": ids["Stimulus/S  1"], "b": ids["Stimulus/S  2"]}
    reference = mne.Epochs(raw, events, wanted, tmin=-0.2, tmax=0.6, baseline=None, preload=True, verbose="error")
    np.testing.assert_array_equal(ours.data, reference.get_data(copy=True))
    names = {code: name for name, code in wanted.items()}
    assert ours.labels.tolist() == [names[code] for code in reference.events[:, 2]]


def test_the_three_files_are_found_by_the_names_the_header_gives_in_any_order(tmp_path):
    files = write_brainvision(known_recording(seed=12), tmp_path)
    (run,) = group_runs([UploadedPart(files[key], files[key].name) for key in ("eeg", "vmrk", "vhdr")], [])
    assert run.file_format == FileFormat.VHDR_SET
    assert run.files == {"header": files["vhdr"], "data": files["eeg"], "markers": files["vmrk"]}


def test_a_missing_data_file_is_refused_naming_it(tmp_path):
    files = write_brainvision(known_recording(seed=13), tmp_path)
    with pytest.raises(EpochSetFormatError, match=r"names file .rec\.eeg., which was not sent"):
        group_runs([UploadedPart(files["vhdr"], "rec.vhdr"), UploadedPart(files["vmrk"], "rec.vmrk")], [])


@pytest.mark.parametrize("reference", ["../../etc/passwd", "/etc/passwd", "sub\\rec.eeg", ".."])
def test_a_header_pointing_outside_the_uploaded_files_is_refused(tmp_path, reference):
    files = write_brainvision(known_recording(seed=14), tmp_path)
    header = files["vhdr"].read_bytes().replace(b"DataFile=rec.eeg", b"DataFile=" + reference.encode())
    with pytest.raises(EpochSetFormatError, match="points outside"):
        header_references(header)


def test_a_marker_file_no_header_names_is_refused(tmp_path):
    files = write_brainvision(known_recording(seed=15), tmp_path)
    stray = tmp_path / "other.vmrk"
    stray.write_bytes(files["vmrk"].read_bytes())
    with pytest.raises(EpochSetFormatError, match=r"'other\.vmrk'"):
        group_runs([*_parts(files), UploadedPart(stray, "other.vmrk")], [])


def test_header_and_marker_files_are_told_apart_by_their_first_line(tmp_path):
    files = write_brainvision(known_recording(seed=16), tmp_path)
    assert sniff(files["vhdr"].read_bytes()[:64]) == FileFormat.VHDR_SET
    assert sniff(files["vmrk"].read_bytes()[:64]) == FileFormat.VHDR_MARKERS
