"""Raw FIF files saved by MNE, read and epoched as MNE reads and epochs them."""

import mne
import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.raw_fif import read_raw_fif
from epoch_assay.engine.recording import ChannelSpec, EpochingSpec, epoch_runs, load_recording
from tests.support.recording_files import known_recording
from tests.support.session_files import write_raw_fif

LIMIT = 1 << 28
EPOCHING = EpochingSpec(tmin=-0.2, tmax=0.6, conditions={"a": ["1"], "b": ["2"]})


@pytest.mark.parametrize("first_samp", [0, 1234])
def test_a_raw_fif_file_gives_the_epochs_mne_gives_from_its_trigger_channel(tmp_path, first_samp):
    path = write_raw_fif(known_recording(seed=21, effect_uv=5.0), tmp_path / "sub-01_raw.fif", first_samp)
    source = load_recording(path, None, EPOCHING, ChannelSpec(), max_array_bytes=LIMIT)
    assert source.runs[0].events_from == "channel:STI 014"
    ours = epoch_runs([(run.recording, run.events) for run in source.runs], EPOCHING)
    # Reference: mne.io.read_raw_fif + mne.find_events + mne.Epochs (Gramfort et al., 2013, MNE-Python).
    raw = mne.io.read_raw_fif(path, preload=True, verbose="error")
    events = mne.find_events(raw, stim_channel="STI 014", consecutive=True, shortest_event=1, verbose="error")
    reference = mne.Epochs(
        raw, events, {"a": 1, "b": 2}, tmin=-0.2, tmax=0.6, baseline=None, picks="all", preload=True, verbose="error"
    )
    np.testing.assert_array_equal(ours.data, reference.get_data(copy=True))
    assert ours.labels.tolist() == ["a" if code == 1 else "b" for code in reference.events[:, 2]]


def test_annotations_of_a_raw_fif_file_are_timed_from_its_first_sample(tmp_path):
    known = known_recording(seed=22)
    path = tmp_path / "annotated_raw.fif"
    info = mne.create_info(["Fz", "Cz"], known.sfreq, "eeg")
    raw = mne.io.RawArray(known.signal_v[:2], info, first_samp=500, verbose="error")
    raw.set_meas_date(0)
    raw.set_annotations(
        mne.Annotations(
            np.array(known.onset_s) + raw.first_time, 0.0, list(known.values), orig_time=raw.info["meas_date"]
        )
    )
    raw.save(path, verbose="error")
    # Reference: mne.events_from_annotations gives each event's sample counted from the measurement start.
    reference, _ids = mne.events_from_annotations(mne.io.read_raw_fif(path, verbose="error"), verbose="error")
    annotations = read_raw_fif(path, max_array_bytes=LIMIT).annotations
    np.testing.assert_allclose(annotations.onset_s * known.sfreq, reference[:, 0] - raw.first_samp, atol=1e-6)


def test_a_fif_file_that_names_another_file_is_refused(tmp_path):
    # MNE writes a split recording as files that name the next one (Raw.save, split_size).
    info = mne.create_info(["Fz", "Cz", "Pz"], 1000.0, "eeg")
    signal = np.random.default_rng(24).normal(0.0, 1e-5, (3, 1_200_000)).astype(np.float32)
    mne.io.RawArray(signal, info, verbose="error").save(tmp_path / "long_raw.fif", split_size="10MB", verbose="error")
    assert (tmp_path / "long_raw-1.fif").exists()
    with pytest.raises(EpochSetFormatError, match="refers to another file"):
        read_raw_fif(tmp_path / "long_raw.fif", max_array_bytes=LIMIT)
