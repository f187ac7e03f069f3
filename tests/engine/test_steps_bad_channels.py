"""Bad-channel detection on simulated faults, spherical-spline interpolation against MNE, actions."""

import mne
import numpy as np
import pytest

from epoch_assay.demo.simulate import CH_NAMES, SimulationConfig, simulate_components, simulate_subject
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.bad_channels import BadChannelCriteria, BadChannels, interpolate_channels
from epoch_assay.engine.units import uv_to_v

ALL_CRITERIA = {
    "near_silent": {},
    "amplitude_outlier": {},
    "partner_agreement": {},
    "mains_excess": {"mains_hz": 50},
    "fast_power_excess": {},
    "bridged_pair": {},
}
FAULTY = {"O2": "silent", "T8": "noisy", "FC1": "bridged", "FC2": "bridged", "P7": "disconnected", "TP10": "line"}
CONFIG = SimulationConfig(n_trials_per_condition=20, drift_uv=0.0, sfreq=250.0)


def _with_faults(seed: int = 5) -> EpochSet:
    """A simulated subject with the faults of ``FAULTY`` injected into its EEG channels."""
    epochs = simulate_subject(CONFIG, 1)
    rng = np.random.default_rng(seed)
    data = epochs.data.copy()
    index = {name: CH_NAMES.index(name) for name in FAULTY}
    shape = data[:, 0].shape
    data[:, index["O2"]] = uv_to_v(0.05) * rng.standard_normal(shape)
    data[:, index["T8"]] += uv_to_v(40.0) * rng.standard_normal(shape)
    bridge = (data[:, index["FC1"]] + data[:, index["FC2"]]) / 2
    data[:, index["FC1"]] = bridge + uv_to_v(0.3) * rng.standard_normal(shape)
    data[:, index["FC2"]] = bridge + uv_to_v(0.3) * rng.standard_normal(shape)
    # A disconnected electrode picks up a slow wandering potential of its own.
    data[:, index["P7"]] = uv_to_v(2.0) * np.cumsum(rng.standard_normal(shape), axis=-1)
    times = epochs.times
    data[:, index["TP10"]] += uv_to_v(60.0) * np.sin(2 * np.pi * 50.0 * times)
    return epochs.with_changes(data=data)


def test_injected_faults_found_with_high_recall_and_at_most_one_false_positive() -> None:
    _, record = BadChannels(criteria=BadChannelCriteria.model_validate(ALL_CRITERIA), action="flag").apply(
        _with_faults()
    )
    found = set(record.channels_flagged)
    recall = len(found & set(FAULTY)) / len(FAULTY)
    assert recall >= 0.9, record.channels_flagged
    assert len(found - set(FAULTY)) <= 1, record.channels_flagged


@pytest.mark.parametrize(
    ("criterion", "channels"),
    [
        ("near_silent", {"O2"}),
        ("fast_power_excess", {"T8"}),
        ("bridged_pair", {"FC1", "FC2"}),
        ("mains_excess", {"TP10"}),
        ("partner_agreement", {"P7"}),
    ],
)
def test_each_criterion_finds_its_fault(criterion: str, channels: set[str]) -> None:
    step = BadChannels(criteria=BadChannelCriteria.model_validate({criterion: {}}), action="flag")
    _, record = step.apply(_with_faults())
    assert channels <= set(record.channels_flagged)


def test_clean_simulated_subject_has_no_bad_channel() -> None:
    step = BadChannels(criteria=BadChannelCriteria.model_validate(ALL_CRITERIA), action="flag")
    _, record = step.apply(simulate_subject(CONFIG, 2))
    assert record.channels_flagged == {}


def test_flag_adds_channels_to_bads_and_keeps_data() -> None:
    epochs = _with_faults()
    flagged, record = BadChannels(criteria=BadChannelCriteria.model_validate({"near_silent": {}}), action="flag").apply(
        epochs
    )
    assert "O2" in flagged.bads and record.channels_flagged == {"O2": ["near_silent"]}
    np.testing.assert_array_equal(flagged.data, epochs.data)


def test_drop_removes_channels_from_every_field() -> None:
    epochs = _with_faults()
    dropped, record = BadChannels(criteria=BadChannelCriteria.model_validate({"near_silent": {}}), action="drop").apply(
        epochs
    )
    assert record.channels_dropped == ["O2"]
    assert "O2" not in dropped.ch_names and dropped.n_channels == epochs.n_channels - 1
    assert dropped.positions.shape == (epochs.n_channels - 1, 3) and len(dropped.ch_types) == dropped.n_channels
    np.testing.assert_array_equal(dropped.data[:, dropped.ch_names.index("Pz")], epochs.data[:, CH_NAMES.index("Pz")])


def test_interpolation_matches_mne_interpolate_bads() -> None:
    epochs = simulate_subject(SimulationConfig(n_trials_per_condition=3), 1).with_changes(bads=frozenset({"C3", "Pz"}))
    interpolated = interpolate_channels(epochs, ["C3", "Pz"])
    # Reference: mne.Epochs.interpolate_bads, spherical splines (Perrin et al., 1989; Gramfort et al., 2013)
    eeg = [i for i, kind in enumerate(epochs.ch_types) if kind == "eeg"]
    names = [epochs.ch_names[i] for i in eeg]
    info = mne.create_info(names, epochs.sfreq, "eeg")
    info.set_montage(
        mne.channels.make_dig_montage(dict(zip(names, epochs.positions[eeg], strict=False)), coord_frame="head")
    )
    info["bads"] = ["C3", "Pz"]
    reference = mne.EpochsArray(epochs.data[:, eeg].copy(), info, verbose="error")
    reference.interpolate_bads(reset_bads=True, verbose="error")
    np.testing.assert_allclose(interpolated.data[:, eeg], reference.get_data(), rtol=0, atol=1e-12)
    assert interpolated.bads == frozenset()


def test_interpolation_recovers_smooth_brain_signal() -> None:
    # A dipole field is smooth over the scalp, so splines from the neighbours should recover
    # it closely (Perrin et al., 1989); here the true potential at Cz is known.
    components = simulate_components(SimulationConfig(n_trials_per_condition=5), 1)
    truth = components.brain + components.background
    epochs = simulate_subject(SimulationConfig(n_trials_per_condition=5), 1).with_changes(data=truth)
    corrupted = epochs.with_changes(data=truth.copy(), bads=frozenset({"Cz"}))
    cz = CH_NAMES.index("Cz")
    corrupted.data[:, cz] = 0.0
    interpolated = interpolate_channels(corrupted, ["Cz"])
    r = np.corrcoef(interpolated.data[:, cz].ravel(), truth[:, cz].ravel())[0, 1]
    assert r > 0.9


def test_interpolate_without_positions_is_refused() -> None:
    epochs = simulate_subject(CONFIG, 1)
    renamed = epochs.with_changes(ch_names=tuple(f"ch{i}" for i in range(epochs.n_channels)), positions=None)
    with pytest.raises(SpecError, match="positions") as error:
        BadChannels(criteria=BadChannelCriteria.model_validate({"near_silent": {}})).check(renamed.meta())
    assert error.value.loc == ("action",)


def test_interpolate_with_standard_names_but_no_file_positions_is_accepted() -> None:
    epochs = simulate_subject(CONFIG, 1).with_changes(positions=None)
    meta = BadChannels(criteria=BadChannelCriteria.model_validate({"near_silent": {}})).check(epochs.meta())
    assert meta == epochs.meta()


def test_empty_criteria_are_refused() -> None:
    with pytest.raises(ValueError, match="at least one criterion"):
        BadChannelCriteria.model_validate({})


@pytest.mark.parametrize(
    ("old", "new"),
    [
        ("flat", "near_silent"),
        ("deviation", "amplitude_outlier"),
        ("correlation", "partner_agreement"),
        ("line_noise", "mains_excess"),
        ("high_frequency", "fast_power_excess"),
        ("bridged", "bridged_pair"),
    ],
)
def test_criterion_names_of_earlier_releases_are_refused_naming_their_successor(old: str, new: str) -> None:
    with pytest.raises(ValueError, match=f"'{old}' is now {new} "):
        BadChannelCriteria.model_validate({old: {}})


def test_mains_criterion_at_nyquist_is_refused() -> None:
    meta = simulate_subject(SimulationConfig(n_trials_per_condition=2, sfreq=100.0, line_freq_hz=20.0), 1).meta()
    with pytest.raises(SpecError) as error:
        BadChannels(criteria=BadChannelCriteria.model_validate({"mains_excess": {"mains_hz": 50}})).check(meta)
    assert error.value.loc == ("criteria", "mains_excess", "mains_hz")


def test_continuous_single_trial_recording_is_processed() -> None:
    epochs = _with_faults()
    data = epochs.data.transpose(1, 0, 2).reshape(1, epochs.n_channels, -1)
    continuous = epochs.with_changes(data=data, labels=np.array(["rest"]))
    step = BadChannels(
        criteria=BadChannelCriteria.model_validate({"near_silent": {}, "mains_excess": {}}), action="flag"
    )
    _, record = step.apply(continuous)
    assert {"O2", "TP10"} <= set(record.channels_flagged)
