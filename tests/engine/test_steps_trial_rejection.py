"""Trial rejection on simulated data with injected artifact trials."""

import numpy as np
import pytest

from epoch_assay.demo.simulate import CH_NAMES, SimulationConfig, simulate_subject
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.trial_rejection import TrialCriteria, TrialRejection
from epoch_assay.engine.units import uv_to_v

CONFIG = SimulationConfig(n_trials_per_condition=30, drift_uv=0.0, blink_rate=0.0, sfreq=250.0)
JUMP, MUSCLE, SWEAT = 3, 11, 27


def _with_artifacts() -> EpochSet:
    """Trial JUMP gets an electrode pop, MUSCLE a muscle burst, SWEAT a slow swing."""
    epochs = simulate_subject(CONFIG, 1)
    rng = np.random.default_rng(8)
    data = epochs.data.copy()
    data[JUMP, CH_NAMES.index("C3"), epochs.n_times // 2 :] += uv_to_v(200.0)
    data[MUSCLE, CH_NAMES.index("T7")] += uv_to_v(15.0) * rng.standard_normal(epochs.n_times)
    data[SWEAT, CH_NAMES.index("O1")] += uv_to_v(80.0) * np.sin(2 * np.pi * 1.5 * epochs.times)
    return epochs.with_changes(data=data)


def _removed_indices(criteria: dict) -> set[int]:
    epochs = _with_artifacts()
    marked = epochs.with_changes(labels=np.array([f"{label}#{i}" for i, label in enumerate(epochs.labels)]))
    _, record = TrialRejection(criteria=TrialCriteria.model_validate(criteria)).apply(marked)
    return {int(label.split("#")[1]) for label in record.trials_removed}


def _peak_to_peak_rejects(epochs: EpochSet, threshold_uv: float) -> np.ndarray:
    # Reference: numpy.ptp over each trial and channel (Harris et al., 2020, NumPy)
    return np.flatnonzero(np.ptp(epochs.data, axis=-1).max(axis=-1) > uv_to_v(threshold_uv))


def test_peak_to_peak_removes_the_trials_numpy_ptp_finds() -> None:
    expected = set(_peak_to_peak_rejects(_with_artifacts(), 150.0).tolist())
    assert _removed_indices({"peak_to_peak_uv": 150.0}) == expected
    assert {JUMP, SWEAT} <= expected


def test_amplitude_z_finds_jump_and_muscle() -> None:
    assert {JUMP, MUSCLE} <= _removed_indices({"amplitude_z": 6.0})


def test_high_frequency_z_finds_muscle_burst_and_broadband_pop_only() -> None:
    removed = _removed_indices({"high_frequency_z": 6.0})
    assert MUSCLE in removed and removed <= {MUSCLE, JUMP}


def test_low_frequency_z_finds_slow_swing() -> None:
    removed = _removed_indices({"low_frequency_z": 5.0})
    assert SWEAT in removed and removed <= {SWEAT, JUMP}


def test_clean_trials_are_kept_at_usual_thresholds() -> None:
    step = TrialRejection(criteria=TrialCriteria(peak_to_peak_uv=150.0, high_frequency_z=6.0))
    kept, record = step.apply(simulate_subject(CONFIG, 2))
    assert record.trials_removed == {} and kept.n_trials == 60


def test_removed_trials_counted_per_condition() -> None:
    epochs = _with_artifacts()
    kept, record = TrialRejection(criteria=TrialCriteria(peak_to_peak_uv=150.0)).apply(epochs)
    labels, counts = np.unique(epochs.labels[_peak_to_peak_rejects(epochs, 150.0)], return_counts=True)
    assert record.trials_removed == dict(zip(labels.tolist(), counts.tolist(), strict=False))
    assert kept.n_trials == epochs.n_trials - counts.sum()


def test_empty_criteria_are_refused() -> None:
    with pytest.raises(ValueError, match="at least one criterion"):
        TrialCriteria()


def test_high_frequency_criterion_without_bandwidth_is_refused() -> None:
    meta = simulate_subject(SimulationConfig(n_trials_per_condition=2, sfreq=80.0, line_freq_hz=20.0), 1).meta()
    with pytest.raises(SpecError) as error:
        TrialRejection(criteria=TrialCriteria(high_frequency_z=5.0)).check(meta)
    assert error.value.loc == ("criteria", "high_frequency_z")


def test_the_ids_of_removed_trials_are_recorded_when_the_upload_named_its_trials() -> None:
    epochs = _with_artifacts()
    ids = np.array([f"trial-{i}" for i in range(epochs.n_trials)])
    kept, record = TrialRejection(criteria=TrialCriteria(peak_to_peak_uv=150.0)).apply(
        epochs.with_changes(trial_arrays={"trial_id": ids})
    )
    # Reference: numpy.ptp over each trial and channel (Harris et al., 2020, NumPy), as above.
    rejected = _peak_to_peak_rejects(epochs, 150.0)
    assert record.trials_removed_ids == ids[rejected].tolist()
    assert kept.trial_arrays["trial_id"].tolist() == np.delete(ids, rejected).tolist()
