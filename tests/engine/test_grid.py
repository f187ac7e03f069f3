"""Grid expansion: names, order, steps, cap."""

import pytest
from pydantic import ValidationError

from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.grid import GridSpec, expand_grid

ISSUE_EXAMPLE = {
    "highpass": {"none": [], "0.5": [{"step": "highpass", "cutoff_hz": 0.5}]},
    "reference": {
        "average": [{"step": "reference", "kind": "average"}],
        "mastoids": [{"step": "reference", "kind": "channels", "channels": ["TP9", "TP10"]}],
    },
}


def test_pipelines_are_named_factor_equals_level_in_factor_order_last_factor_fastest():
    names = [point.pipeline.name for point in expand_grid(GridSpec(factors=ISSUE_EXAMPLE))]
    assert names == [
        "highpass=none,reference=average",
        "highpass=none,reference=mastoids",
        "highpass=0.5,reference=average",
        "highpass=0.5,reference=mastoids",
    ]


def test_each_pipeline_is_the_concatenation_of_its_levels_steps():
    point = expand_grid(GridSpec(factors=ISSUE_EXAMPLE))[3]
    assert [step.step for step in point.pipeline.steps] == ["highpass", "reference"]
    assert point.pipeline.steps[1].channels == ("TP9", "TP10")
    assert point.levels == {"highpass": "0.5", "reference": "mastoids"}


def test_grid_past_the_cap_is_refused_with_the_count_and_the_limit():
    grid = GridSpec(factors={"a": {str(i): [] for i in range(5)}, "b": {str(i): [] for i in range(5)}})
    with pytest.raises(SpecError) as caught:
        expand_grid(grid, max_pipelines=24)
    assert caught.value.loc == ("grid", "factors")
    assert "25 pipelines" in caught.value.message and "24" in caught.value.message


def test_grid_at_the_cap_expands():
    grid = GridSpec(factors={"a": {str(i): [] for i in range(4)}, "b": {str(i): [] for i in range(6)}})
    assert len(expand_grid(grid, max_pipelines=24)) == 24


@pytest.mark.parametrize("factors", [{"a=b": {"x": []}}, {"a": {"x,y": []}}, {"a": {}}, {}])
def test_unusable_factor_or_level_names_are_refused(factors):
    with pytest.raises(ValidationError):
        GridSpec(factors=factors)
