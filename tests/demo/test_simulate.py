"""The READ-01 simulator: shapes and units, the designed effect, and each noise component."""

from dataclasses import fields

import mne
import numpy as np
import pytest
from scipy import signal, stats

from epoch_assay.demo.scenario import CONGRUENT, INCONGRUENT
from epoch_assay.demo.simulate import (
    CH_NAMES,
    EEG_CHANNELS,
    SimulationConfig,
    design_effect_dipole,
    eeg_info,
    head_model,
    simulate_components,
    simulate_study,
    simulate_subject,
    write_study_npz,
)

N_EEG = len(EEG_CHANNELS)
CENTRO_PARIETAL = {"C3", "Cz", "C4", "CP1", "CP2", "P3", "Pz", "P4"}
QUIET = dict(noise_uv=0.0, sensor_noise_uv=0.0, drift_uv=0.0, line_noise_uv=0.0, blink_rate=0.0)
COMPONENTS = ("brain", "background", "sensor_noise", "drift", "line_noise", "blinks")


def window_difference(data: np.ndarray, labels: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Mean incongruent − congruent difference over 0.3-0.5 s, shape (n_channels,), in V."""
    window = (times >= 0.3) & (times <= 0.5)
    means = data[:, :, window].mean(axis=2)
    return means[labels == INCONGRUENT].mean(axis=0) - means[labels == CONGRUENT].mean(axis=0)


@pytest.fixture(scope="module")
def default_subject():
    return simulate_subject(SimulationConfig(), 1)


def test_same_seed_and_subject_give_identical_data():
    first = simulate_subject(SimulationConfig(n_trials_per_condition=10), 3)
    second = simulate_subject(SimulationConfig(n_trials_per_condition=10), 3)
    np.testing.assert_array_equal(first.data, second.data)
    np.testing.assert_array_equal(first.labels, second.labels)


def test_other_subject_or_seed_gives_other_data():
    config = SimulationConfig(n_trials_per_condition=10)
    reference = simulate_subject(config, 1).data
    assert not np.allclose(reference, simulate_subject(config, 2).data)
    assert not np.allclose(reference, simulate_subject(SimulationConfig(n_trials_per_condition=10, seed=99), 1).data)


def test_subjects_differ_in_noise_and_drift_levels():
    config = SimulationConfig(n_trials_per_condition=20)
    background = [np.std(simulate_components(config, index).background[:, :N_EEG]) for index in (1, 2, 3, 4)]
    drift = [np.std(simulate_components(config, index).drift[:, :N_EEG]) for index in (1, 2, 3, 4)]
    assert max(background) / min(background) > 1.05
    assert max(drift) / min(drift) > 1.05


def test_epoch_set_has_designed_shape_channels_and_labels(default_subject):
    assert default_subject.data.shape == (140, 33, 250)
    assert default_subject.sfreq == 250.0 and default_subject.tmin == -0.2
    assert default_subject.ch_names == CH_NAMES and CH_NAMES[-1] == "VEOG"
    assert default_subject.ch_types == ("eeg",) * 32 + ("eog",)
    assert default_subject.condition_counts() == {CONGRUENT: 70, INCONGRUENT: 70}


def test_positions_are_montage_head_coordinates_with_nan_for_veog(default_subject):
    # Reference: MNE-Python's 10-20 montage (Gramfort et al., 2013), set on a fresh Info.
    info = mne.create_info(list(EEG_CHANNELS), 250.0, "eeg")
    name = "colin27_1020" if "colin27_1020" in mne.channels.get_builtin_montages() else "standard_1020"
    info.set_montage(mne.channels.make_standard_montage(name))
    expected = np.array([ch["loc"][:3] for ch in info["chs"]])
    np.testing.assert_allclose(default_subject.positions[:N_EEG], expected)
    assert np.isnan(default_subject.positions[-1]).all()


def test_data_are_in_volts_at_a_plausible_scale(default_subject):
    # Scalp EEG channel SDs are microvolts to tens of microvolts.  # common practice
    median_sd = np.median(default_subject.data[:, :N_EEG].std(axis=(0, 2)))
    assert 1e-6 < median_sd < 1e-4


def test_epoch_set_is_the_sum_of_its_components(default_subject):
    components = simulate_components(SimulationConfig(), 1)
    np.testing.assert_allclose(default_subject.data, sum(getattr(components, name) for name in COMPONENTS))


def test_switching_blinks_off_leaves_every_other_component_unchanged():
    with_blinks = simulate_components(SimulationConfig(n_trials_per_condition=10, blink_rate=1.0), 1)
    without = simulate_components(SimulationConfig(n_trials_per_condition=10, blink_rate=0.0), 1)
    assert np.abs(with_blinks.blinks).max() > 0 and np.abs(without.blinks).max() == 0
    for name in set(COMPONENTS) - {"blinks"}:
        np.testing.assert_array_equal(getattr(with_blinks, name), getattr(without, name))


def test_effect_is_negative_and_largest_over_centro_parietal_channels():
    # A quiet background and many trials, so this checks where the effect is, not whether it is detectable.
    config = SimulationConfig(n_trials_per_condition=200, noise_uv=3.0, drift_uv=0.0, blink_rate=0.0)
    epochs = simulate_subject(config, 1)
    difference = window_difference(epochs.data[:, :N_EEG], epochs.labels, epochs.times)
    strongest = EEG_CHANNELS[int(np.argmax(np.abs(difference)))]
    assert strongest in CENTRO_PARIETAL
    assert difference[EEG_CHANNELS.index(strongest)] < 0
    assert -5e-6 < difference[EEG_CHANNELS.index("Pz")] < -2e-6


def test_effect_reaches_most_channels_by_volume_conduction():
    components = simulate_components(SimulationConfig(), 1)
    difference = window_difference(components.brain[:, :N_EEG], components.labels, SimulationConfig().times)
    assert np.sum(np.abs(difference) > 0.05 * np.abs(difference).max()) >= 20


def test_no_effect_leaves_differences_within_noise():
    epochs = simulate_subject(SimulationConfig(effect_uv=0.0, n_trials_per_condition=100), 1)
    window = (epochs.times >= 0.3) & (epochs.times <= 0.5)
    means = epochs.data[:, :N_EEG, window].mean(axis=2)
    # Reference: scipy.stats.ttest_ind(equal_var=False), Welch's t-test (Virtanen et al., 2020, SciPy 1.0)
    incongruent, congruent = means[epochs.labels == INCONGRUENT], means[epochs.labels == CONGRUENT]
    t = stats.ttest_ind(incongruent, congruent, equal_var=False).statistic
    assert np.abs(t).max() < 4.0


def test_effect_peak_at_pz_equals_effect_uv():
    config = SimulationConfig(trial_amplitude_sd=0.0, trial_latency_sd_s=0.0, subject_effect_sd=0.0, **QUIET)
    components = simulate_components(config, 1)
    peak = int(np.argmin(np.abs(config.times - config.effect_peak_s)))
    brain = components.brain[:, CH_NAMES.index("Pz"), peak]
    difference = brain[components.labels == INCONGRUENT].mean() - brain[components.labels == CONGRUENT].mean()
    np.testing.assert_allclose(difference, -4.0e-6, rtol=1e-9)


def test_effect_topography_equals_mne_forward_dipole():
    config = SimulationConfig(trial_amplitude_sd=0.0, trial_latency_sd_s=0.0, subject_effect_sd=0.0, **QUIET)
    components = simulate_components(config, 1)
    peak = int(np.argmin(np.abs(config.times - config.effect_peak_s)))
    brain = components.brain[:, :N_EEG, peak]
    incongruent, congruent = components.labels == INCONGRUENT, components.labels == CONGRUENT
    topography = brain[incongruent].mean(axis=0) - brain[congruent].mean(axis=0)

    # Reference: mne.make_forward_dipole on MNE's own sphere fit (Gramfort et al., 2013, MNE-Python).
    dipole = design_effect_dipole(config)
    info = eeg_info()
    sphere = mne.make_sphere_model("auto", "auto", info, verbose=False)
    mne_dipole = mne.Dipole(
        times=np.array([0.0]),
        pos=dipole.position[None, :],
        amplitude=np.array([dipole.moment]),
        ori=dipole.orientation[None, :],
        gof=np.array([100.0]),
    )
    forward, _ = mne.make_forward_dipole(mne_dipole, sphere, info, verbose=False)
    expected = forward["sol"]["data"][:, 0] * dipole.moment
    np.testing.assert_allclose(topography, expected, rtol=1e-6, atol=1e-12)


def test_background_power_falls_as_one_over_frequency():
    # Two-second epochs give a finer frequency grid than the default one-second ones.
    config = SimulationConfig(n_trials_per_condition=30, tmax=1.8, **{**QUIET, "noise_uv": 12.0})
    background = simulate_components(config, 1).background[:, :N_EEG]
    # Reference: scipy.signal.welch (Virtanen et al., 2020, SciPy 1.0); pink noise has power ∝ 1/f by definition.
    freqs, power = signal.welch(background, fs=config.sfreq, nperseg=config.n_times, axis=-1)
    band = (freqs >= 2.0) & (freqs <= 40.0)
    slope = np.polyfit(np.log10(freqs[band]), np.log10(power.mean(axis=(0, 1))[band]), 1)[0]
    assert -1.15 < slope < -0.85


def test_background_rms_matches_noise_uv_within_subject_spread():
    config = SimulationConfig(n_trials_per_condition=50, subject_spread=0.0)
    background = simulate_components(config, 1).background[:, :N_EEG]
    np.testing.assert_allclose(np.sqrt(np.mean(background**2)), 12e-6, rtol=0.15)


def test_background_is_correlated_between_neighbouring_channels():
    background = simulate_components(SimulationConfig(n_trials_per_condition=30), 1).background[:, :N_EEG]
    correlation = np.corrcoef(background.transpose(1, 0, 2).reshape(N_EEG, -1))
    positions = head_model().electrode_positions
    distance = np.linalg.norm(positions[:, None] - positions[None, :], axis=-1)
    np.fill_diagonal(distance, np.inf)
    nearest = np.argmin(distance, axis=1)
    assert correlation[np.arange(N_EEG), nearest].mean() > 0.5


def test_sensor_noise_is_uncorrelated_between_channels():
    noise = simulate_components(SimulationConfig(n_trials_per_condition=30), 1).sensor_noise
    correlation = np.corrcoef(noise.transpose(1, 0, 2).reshape(len(CH_NAMES), -1))
    assert np.abs(correlation[np.triu_indices(len(CH_NAMES), 1)]).max() < 0.05


def test_drift_changes_more_across_trials_than_within_an_epoch():
    drift = simulate_components(SimulationConfig(), 1).drift[:, :N_EEG]
    within = drift.std(axis=2).mean()
    across = drift.mean(axis=2).std(axis=0).mean()
    assert within < 0.2 * across


def test_blinks_dominate_veog_and_frontopolar_over_occipital_channels():
    blinks = simulate_components(SimulationConfig(n_trials_per_condition=20, blink_rate=1.0), 1).blinks
    rms = dict(zip(CH_NAMES, np.sqrt(np.mean(blinks**2, axis=(0, 2))), strict=False))
    occipital = max(rms[name] for name in ("O1", "Oz", "O2"))
    assert rms["VEOG"] > rms["Fp1"] and rms["VEOG"] > rms["Fp2"]
    assert min(rms["Fp1"], rms["Fp2"]) > 3.0 * occipital


def test_blink_peaks_at_frontopolar_sites_lie_in_the_configured_range():
    config = SimulationConfig(n_trials_per_condition=20, blink_rate=1.0, tmin=-1.0, tmax=1.5)
    blinks = simulate_components(config, 1).blinks
    frontopolar_peak = blinks[:, [CH_NAMES.index("Fp1"), CH_NAMES.index("Fp2")]].mean(axis=1).max(axis=1)
    assert (frontopolar_peak > 49e-6).all() and (frontopolar_peak < 151e-6).all()


def test_line_noise_shows_a_peak_at_50_hz(default_subject):
    # Reference: scipy.signal.welch (Virtanen et al., 2020, SciPy 1.0)
    freqs, power = signal.welch(default_subject.data[:, :N_EEG], fs=250.0, nperseg=250, axis=-1)
    mean_power = power.mean(axis=(0, 1))
    neighbours = mean_power[((freqs >= 40) & (freqs <= 45)) | ((freqs >= 55) & (freqs <= 60))].mean()
    assert mean_power[freqs == 50.0][0] > 10.0 * neighbours


def test_study_names_subjects_and_writes_one_npz_each(tmp_path):
    config = SimulationConfig(n_trials_per_condition=5)
    study = simulate_study(config, 2)
    assert [subject for subject, _ in study] == ["sub-01", "sub-02"]
    paths = write_study_npz(tmp_path / "npz", config, 2)
    assert len(paths) == 2
    with np.load(paths[1]) as stored:
        np.testing.assert_array_equal(stored["data"], study[1][1].data)
        assert str(stored["unit"]) == "V"


def test_config_refuses_a_blink_rate_outside_zero_to_one():
    with pytest.raises(ValueError, match="blink_rate"):
        SimulationConfig(blink_rate=1.5)


def test_config_is_frozen():
    config = SimulationConfig()
    with pytest.raises(AttributeError):
        setattr(config, fields(config)[0].name, 1)
