"""Pipeline specs: parsing, checking and applying steps in order."""

import numpy as np
import pytest
from pydantic import ValidationError

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.windows import window_mask
from tests.engine.conftest import random_epoch_set

BASELINE_S = (-0.1, 0.0)
STEPS = [
    {"step": "reference", "kind": "average"},
    {"step": "lowpass", "cutoff_hz": 20.0, "method": "iir"},
    {"step": "baseline", "window_s": list(BASELINE_S)},
]


def _epochs() -> EpochSet:
    return random_epoch_set(n_times=200, sfreq=100.0, tmin=-0.1)


def _pipeline(steps: list[dict]) -> PipelineSpec:
    return PipelineSpec.model_validate({"name": "test", "steps": steps})


def test_pipeline_applies_steps_in_the_order_written() -> None:
    pipeline = _pipeline(STEPS)
    expected = _epochs()
    for step in pipeline.steps:
        expected, _ = step.apply(expected)
    processed, _ = apply_pipeline(pipeline, _epochs())
    np.testing.assert_array_equal(processed.data, expected.data)


def test_baseline_written_last_leaves_a_zero_window_mean() -> None:
    processed, _ = apply_pipeline(_pipeline(STEPS), _epochs())
    in_window = window_mask(processed.times, BASELINE_S)
    np.testing.assert_allclose(processed.data[:, :, in_window].mean(axis=-1), 0.0, atol=1e-20)


def test_baseline_written_first_is_undone_by_the_later_filter() -> None:
    processed, _ = apply_pipeline(_pipeline([STEPS[2], STEPS[1]]), _epochs())
    in_window = window_mask(processed.times, BASELINE_S)
    assert np.abs(processed.data[:, :, in_window].mean(axis=-1)).max() > 1e-9


def test_pipeline_returns_one_record_per_step_with_its_duration() -> None:
    _, records = apply_pipeline(_pipeline(STEPS), _epochs())
    assert [record.step for record in records] == ["reference", "lowpass", "baseline"]
    assert all(record.seconds >= 0.0 for record in records)


def test_check_locates_errors_under_their_step_index() -> None:
    pipeline = _pipeline([STEPS[0], {"step": "highpass", "cutoff_hz": 80.0}])
    with pytest.raises(SpecError) as caught:
        pipeline.check(_epochs().meta())
    assert caught.value.loc == ("steps", 1, "cutoff_hz")


def test_check_returns_the_metadata_of_a_valid_pipeline() -> None:
    meta = _epochs().meta()
    assert _pipeline(STEPS).check(meta) == meta


def test_unknown_step_name_is_a_validation_error() -> None:
    with pytest.raises(ValidationError) as caught:
        _pipeline([{"step": "smooth", "width": 3}])
    assert "smooth" in str(caught.value)
