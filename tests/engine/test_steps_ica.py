"""ICA: removal of a known simulated blink source, determinism, checks."""

import numpy as np
import pytest

from epoch_assay.demo.simulate import CH_NAMES, EOG_CHANNEL, SimulationConfig, simulate_components, simulate_subject
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.steps.ica import Ica, OcularCriterion

CONFIG = SimulationConfig(n_trials_per_condition=25, drift_uv=0.0, line_noise_uv=0.0, blink_rate=0.6, sfreq=250.0)
FRONTAL = [CH_NAMES.index(name) for name in ("Fp1", "Fp2", "F7", "F8")]


@pytest.fixture(scope="module")
def blinking() -> tuple[EpochSet, np.ndarray]:
    """A subject with frequent blinks, and its signal without them (V)."""
    components = simulate_components(CONFIG, 1)
    return simulate_subject(CONFIG, 1), components.total() - components.blinks


def _frontal_correlations(data: np.ndarray, clean: np.ndarray) -> np.ndarray:
    return np.array([np.corrcoef(data[:, i].ravel(), clean[:, i].ravel())[0, 1] for i in FRONTAL])


def test_blink_component_removed_so_frontal_channels_match_clean_signal(blinking) -> None:
    epochs, clean = blinking
    assert _frontal_correlations(epochs.data, clean).min() < 0.9
    cleaned, record = Ica(n_components=20, seed=1).apply(epochs)
    assert [component.kind for component in record.components_removed] == ["ocular"]
    assert _frontal_correlations(cleaned.data, clean).min() > 0.9


def test_fastica_also_removes_the_blink(blinking) -> None:
    # FastICA (Hyvärinen, 1999) as implemented by scikit-learn, called through MNE's ICA.
    epochs, clean = blinking
    cleaned, record = Ica(method="fastica", n_components=20, seed=1).apply(epochs)
    assert any(component.kind == "ocular" for component in record.components_removed)
    assert _frontal_correlations(cleaned.data, clean).min() > 0.9


def test_frontal_channels_stand_in_for_missing_eog(blinking) -> None:
    epochs, clean = blinking
    keep = [i for i, name in enumerate(epochs.ch_names) if name != EOG_CHANNEL]
    no_eog = epochs.with_changes(
        data=epochs.data[:, keep],
        ch_names=tuple(epochs.ch_names[i] for i in keep),
        ch_types=tuple(epochs.ch_types[i] for i in keep),
        positions=epochs.positions[keep],
    )
    cleaned, record = Ica(n_components=20, seed=1).apply(no_eog)
    assert any(component.kind == "ocular" for component in record.components_removed)
    assert _frontal_correlations(cleaned.data, clean[:, keep]).min() > 0.9


def test_same_seed_gives_same_result(blinking) -> None:
    epochs, _ = blinking
    first, _ = Ica(n_components=8, seed=4, ocular=OcularCriterion(threshold=0.5)).apply(epochs)
    second, _ = Ica(n_components=8, seed=4, ocular=OcularCriterion(threshold=0.5)).apply(epochs)
    np.testing.assert_array_equal(first.data, second.data)


def test_eog_channel_left_unchanged(blinking) -> None:
    epochs, _ = blinking
    cleaned, _ = Ica(n_components=8, seed=1).apply(epochs)
    veog = CH_NAMES.index(EOG_CHANNEL)
    np.testing.assert_array_equal(cleaned.data[:, veog], epochs.data[:, veog])


def test_more_components_than_channels_is_refused(blinking) -> None:
    epochs, _ = blinking
    with pytest.raises(SpecError, match="at most 32") as error:
        Ica(n_components=40).check(epochs.meta())
    assert error.value.loc == ("n_components",)


def test_fraction_of_variance_outside_unit_interval_is_refused() -> None:
    with pytest.raises(ValueError, match="fraction"):
        Ica(n_components=1.5)
