"""REST and 'none' references, against MNE's REST on the same spherical forward model."""

import mne
import numpy as np
import pytest

from epoch_assay.demo.simulate import CH_NAMES, SimulationConfig, simulate_subject
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.montage import epoch_set_positions
from epoch_assay.engine.steps.reference import Reference
from epoch_assay.engine.steps.rest import SOURCE_EXCLUDE_M, SOURCE_SPACING_M, rest_reference_weights


@pytest.fixture(scope="module")
def subject() -> EpochSet:
    return simulate_subject(SimulationConfig(n_trials_per_condition=4, drift_uv=0.0), 1)


def _mne_rest(epochs: EpochSet) -> np.ndarray:
    """EEG data REST-referenced by MNE on the forward model it documents for REST."""
    # Reference: mne.set_eeg_reference(ref_channels="REST", forward=...) (Gramfort et al., 2013,
    # MNE-Python), implementing Yao (2001); sphere and source grid as in MNE's REST example.
    eeg = epochs.picks(("eeg",))
    names = [epochs.ch_names[i] for i in eeg]
    info = mne.create_info(names, epochs.sfreq, "eeg")
    info.set_montage(
        mne.channels.make_dig_montage(dict(zip(names, epochs.positions[eeg], strict=False)), coord_frame="head")
    )
    sphere = mne.make_sphere_model("auto", "auto", info, verbose="error")
    src = mne.setup_volume_source_space(
        sphere=sphere, pos=SOURCE_SPACING_M * 1000, exclude=SOURCE_EXCLUDE_M * 1000, verbose="error"
    )
    forward = mne.make_forward_solution(info, trans=None, src=src, bem=sphere, eeg=True, meg=False, verbose="error")
    mne_epochs = mne.EpochsArray(epochs.data[:, eeg].copy(), info, verbose="error")
    referenced, _ = mne.set_eeg_reference(mne_epochs, "REST", forward=forward, verbose="error")
    return referenced.get_data()


def test_rest_matches_mne_rest_on_same_sphere_model(subject: EpochSet) -> None:
    referenced, _ = Reference(kind="rest").apply(subject)
    eeg = subject.picks(("eeg",))
    np.testing.assert_allclose(referenced.data[:, eeg], _mne_rest(subject), rtol=0, atol=1e-12)


def test_rest_weights_sum_to_one(subject: EpochSet) -> None:
    # A reference must leave a signal common to all channels unchanged in differences and
    # remove it entirely: V - r·V is zero for V = 1, so the weights sum to one (Yao, 2001).
    weights = rest_reference_weights(subject.positions[subject.picks(("eeg",))])
    assert weights.sum() == pytest.approx(1.0, abs=1e-9)


def test_rest_leaves_bad_channel_out_of_the_reference(subject: EpochSet) -> None:
    flagged = subject.with_changes(bads=frozenset({"Cz"}))
    corrupted = flagged.with_changes(data=flagged.data.copy())
    corrupted.data[:, CH_NAMES.index("Cz")] += 1e-3
    clean, _ = Reference(kind="rest").apply(flagged)
    dirty, _ = Reference(kind="rest").apply(corrupted)
    pz = CH_NAMES.index("Pz")
    np.testing.assert_allclose(dirty.data[:, pz], clean.data[:, pz], atol=1e-15)


def test_rest_uses_montage_positions_when_file_has_none(subject: EpochSet) -> None:
    without = subject.with_changes(positions=None)
    np.testing.assert_allclose(epoch_set_positions(without)[:32], subject.positions[:32], atol=1e-9)
    from_montage, _ = Reference(kind="rest").apply(without)
    from_file, _ = Reference(kind="rest").apply(subject)
    np.testing.assert_allclose(from_montage.data, from_file.data, atol=1e-12)


def test_rest_refused_when_channels_have_no_position(subject: EpochSet) -> None:
    renamed = subject.with_changes(ch_names=tuple(f"X{i}" for i in range(subject.n_channels)), positions=None)
    with pytest.raises(SpecError, match="positions") as error:
        Reference(kind="rest").check(renamed.meta())
    assert error.value.loc == ("kind",)


def test_none_reference_leaves_data_unchanged(subject: EpochSet) -> None:
    referenced, record = Reference(kind="none").apply(subject)
    np.testing.assert_array_equal(referenced.data, subject.data)
    assert record.step == "reference" and record.params.kind == "none"


def test_channel_reference_dropped_earlier_is_refused_at_apply(subject: EpochSet) -> None:
    keep = [i for i, name in enumerate(subject.ch_names) if name != "TP9"]
    dropped = subject.with_changes(
        data=subject.data[:, keep],
        ch_names=tuple(subject.ch_names[i] for i in keep),
        ch_types=tuple(subject.ch_types[i] for i in keep),
        positions=subject.positions[keep],
    )
    with pytest.raises(SpecError, match="TP9"):
        Reference(kind="channels", channels=("TP9", "TP10")).apply(dropped)
