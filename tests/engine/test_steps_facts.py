"""Facts of the trade on simulated data with slow drift: what a high-pass does to the score."""

import numpy as np

from epoch_assay.demo.scenario import CONDITIONS, INCONGRUENT
from epoch_assay.demo.simulate import SimulationConfig, simulate_subject
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec

# A strong effect on strongly drifting data, so that the filters' effects stand out in two subjects.
DRIFTING = SimulationConfig(n_trials_per_condition=60, effect_uv=10.0, drift_uv=40.0, blink_rate=0.0)
SCORING = ScoringSpec(conditions=(INCONGRUENT, next(c for c in CONDITIONS if c != INCONGRUENT)), window_s=(0.3, 0.5))


def _fraction(epochs: EpochSet, steps: list[dict]) -> float:
    processed, _ = apply_pipeline(PipelineSpec(name="p", steps=steps), epochs)
    return score_epochs(processed, SCORING).significant_fraction


def _mean_fractions(config: SimulationConfig, steps: list[dict], subjects: range = range(1, 3)) -> float:
    return float(np.mean([_fraction(simulate_subject(config, index), steps) for index in subjects]))


def test_highpass_raises_significant_fraction_on_drifting_data() -> None:
    # common practice: a 0.1-1 Hz high-pass removes slow drift that adds trial-to-trial variance
    unfiltered = _mean_fractions(DRIFTING, [])
    filtered = _mean_fractions(DRIFTING, [{"step": "highpass", "cutoff_hz": 0.5}])
    assert filtered > unfiltered + 0.1


def test_very_high_cutoff_on_slow_component_lowers_significant_fraction() -> None:
    # common practice: a 5 Hz high-pass removes much of a slow ERP component along with the drift
    moderate = _mean_fractions(DRIFTING, [{"step": "highpass", "cutoff_hz": 0.5}])
    aggressive = _mean_fractions(DRIFTING, [{"step": "highpass", "cutoff_hz": 5.0}])
    assert aggressive < moderate - 0.1
