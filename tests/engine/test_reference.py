"""Re-referencing: average and channel references, and their checks."""

import mne
import numpy as np
import pytest
from pydantic import ValidationError

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.reference import Reference
from tests.engine.conftest import random_epoch_set

NAMES = ("Fz", "Cz", "Pz", "TP9", "TP10", "HEOG")
TYPES = ("eeg", "eeg", "eeg", "eeg", "eeg", "eog")


def _epochs(bads: frozenset[str] = frozenset()) -> EpochSet:
    return random_epoch_set(n_channels=len(NAMES), ch_names=NAMES, ch_types=TYPES, bads=bads)


def _mne_rereferenced(epochs: EpochSet, ref_channels: str | list[str]) -> np.ndarray:
    # Reference: mne.set_eeg_reference (Gramfort et al., 2013, MNE-Python)
    info = mne.create_info(list(epochs.ch_names), epochs.sfreq, list(epochs.ch_types))
    mne_epochs = mne.EpochsArray(epochs.data.copy(), info, tmin=epochs.tmin, verbose="error")
    mne_epochs.info["bads"] = sorted(epochs.bads)
    referenced, _ = mne.set_eeg_reference(mne_epochs, ref_channels, projection=False, verbose="error")
    return referenced.get_data()


def test_average_reference_sums_to_zero_over_good_eeg_channels() -> None:
    epochs = _epochs(bads=frozenset({"Pz"}))
    referenced, _ = Reference(kind="average").apply(epochs)
    good_eeg = epochs.picks(("eeg",))
    np.testing.assert_allclose(referenced.data[:, good_eeg].sum(axis=1), 0.0, atol=1e-18)


def test_average_reference_matches_mne_on_good_channels() -> None:
    # MNE leaves bad channels un-referenced; here they are re-referenced too, so only the
    # good channels are compared.
    epochs = _epochs(bads=frozenset({"Pz"}))
    referenced, _ = Reference(kind="average").apply(epochs)
    good = epochs.picks(("eeg", "eog"))
    np.testing.assert_allclose(referenced.data[:, good], _mne_rereferenced(epochs, "average")[:, good], atol=1e-18)


def test_average_reference_leaves_bad_channels_out_of_the_mean() -> None:
    epochs = _epochs(bads=frozenset({"Pz"}))
    changed = epochs.data.copy()
    changed[:, NAMES.index("Pz")] += 1e-3
    referenced, _ = Reference(kind="average").apply(epochs)
    referenced_changed, _ = Reference(kind="average").apply(epochs.with_changes(data=changed))
    others = [i for i, name in enumerate(NAMES) if name != "Pz"]
    np.testing.assert_allclose(referenced_changed.data[:, others], referenced.data[:, others], atol=1e-18)


def test_average_reference_is_applied_to_bad_channels() -> None:
    epochs = _epochs(bads=frozenset({"Pz"}))
    referenced, _ = Reference(kind="average").apply(epochs)
    good_eeg = epochs.picks(("eeg",))
    pz = NAMES.index("Pz")
    expected = epochs.data[:, pz] - epochs.data[:, good_eeg].mean(axis=1)
    np.testing.assert_allclose(referenced.data[:, pz], expected, atol=1e-18)


def test_reference_leaves_eog_channels_unchanged() -> None:
    epochs = _epochs()
    referenced, _ = Reference(kind="average").apply(epochs)
    np.testing.assert_array_equal(referenced.data[:, NAMES.index("HEOG")], epochs.data[:, NAMES.index("HEOG")])


def test_linked_mastoid_reference_subtracts_the_mean_of_both_mastoids() -> None:
    epochs = _epochs()
    referenced, _ = Reference(kind="channels", channels=("TP9", "TP10")).apply(epochs)
    eeg = epochs.picks(("eeg",))
    mastoids = epochs.data[:, [NAMES.index("TP9"), NAMES.index("TP10")]].mean(axis=1, keepdims=True)
    np.testing.assert_allclose(referenced.data[:, eeg], epochs.data[:, eeg] - mastoids, atol=1e-18)


def test_linked_mastoid_reference_matches_mne() -> None:
    epochs = _epochs()
    referenced, _ = Reference(kind="channels", channels=("TP9", "TP10")).apply(epochs)
    np.testing.assert_allclose(referenced.data, _mne_rereferenced(epochs, ["TP9", "TP10"]), atol=1e-18)


def test_single_reference_channel_becomes_zero() -> None:
    referenced, _ = Reference(kind="channels", channels=("Cz",)).apply(_epochs())
    np.testing.assert_array_equal(referenced.data[:, NAMES.index("Cz")], 0.0)


def test_reference_does_not_modify_the_input() -> None:
    epochs = _epochs()
    original = epochs.data.copy()
    Reference(kind="average").apply(epochs)
    np.testing.assert_array_equal(epochs.data, original)


def test_bad_reference_channel_is_reported_as_a_warning() -> None:
    _, record = Reference(kind="channels", channels=("TP9",)).apply(_epochs(bads=frozenset({"TP9"})))
    assert len(record.warnings) == 1 and "TP9" in record.warnings[0]


def test_check_names_the_missing_reference_channel() -> None:
    with pytest.raises(SpecError) as caught:
        Reference(kind="channels", channels=("TP9", "M2")).check(_epochs().meta())
    assert caught.value.loc == ("channels", 1)
    assert "'M2' is not in this epoch set" in caught.value.message
    assert "available: Fz, Cz, Pz, TP9, TP10" in caught.value.message


def test_check_refuses_a_non_eeg_reference_channel() -> None:
    with pytest.raises(SpecError) as caught:
        Reference(kind="channels", channels=("HEOG",)).check(_epochs().meta())
    assert caught.value.loc == ("channels", 0)
    assert "'HEOG'" in caught.value.message and "not EEG" in caught.value.message


def test_average_reference_with_every_eeg_channel_bad_is_refused() -> None:
    epochs = _epochs(bads=frozenset(NAMES[:5]))
    with pytest.raises(SpecError) as caught:
        Reference(kind="average").apply(epochs)
    assert "every EEG channel is marked bad" in caught.value.message


@pytest.mark.parametrize(
    ("spec", "fragment"),
    [
        ({"kind": "channels"}, "needs at least one channel"),
        ({"kind": "channels", "channels": ["TP9", "TP9"]}, "TP9 more than once"),
        ({"kind": "average", "channels": ["Cz"]}, "takes no 'channels'"),
        ({"kind": "median"}, "kind"),
    ],
    ids=["channels-missing", "channels-repeated", "average-with-channels", "unknown-kind"],
)
def test_invalid_reference_spec_is_refused(spec: dict, fragment: str) -> None:
    with pytest.raises(ValidationError) as caught:
        Reference.model_validate({"step": "reference", **spec})
    assert fragment in str(caught.value)


def test_rest_on_fewer_than_four_good_channels_is_refused_by_check_and_apply() -> None:
    # A sphere fit to electrode positions needs at least four points (four unknowns: centre and radius).
    epochs = EpochSet(
        data=np.random.default_rng(0).standard_normal((4, 3, 50)) * 1e-5,
        sfreq=100.0,
        tmin=0.0,
        ch_names=("Cz", "Pz", "Fz"),
        ch_types=("eeg",) * 3,
        labels=np.array(["a", "b"] * 2),
    )
    step = Reference(kind="rest")
    with pytest.raises(SpecError, match="at least 4"):
        step.check(epochs.meta())
    with pytest.raises(SpecError, match="at least 4"):
        step.apply(epochs)
