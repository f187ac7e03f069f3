"""Allowed trial tests and corrections come from their registries: the spec, its schema and the docs."""

from pathlib import Path

import numpy as np
import pydantic
import pytest

from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.stats import CORRECTIONS, TRIAL_TESTS, ComparisonSettings, compare_channels

METHODS_PAGE = Path(__file__).resolve().parents[2] / "docs" / "methods.md"


def test_scoring_schema_lists_exactly_the_registered_tests_and_corrections():
    properties = ScoringSpec.model_json_schema()["properties"]
    assert properties["test"]["enum"] == list(TRIAL_TESTS)
    assert properties["correction"]["enum"] == list(CORRECTIONS)


@pytest.mark.parametrize("field, value", [("test", "welsh"), ("correction", "holm_typo")])
def test_an_unregistered_name_is_refused_with_the_registered_ones(field, value):
    with pytest.raises(pydantic.ValidationError, match=f"unknown {field} '{value}'; choose one of"):
        ScoringSpec.model_validate({"conditions": ["a", "b"], "window_s": [0.1, 0.2], field: value})


@pytest.mark.parametrize("name", [*TRIAL_TESTS, *CORRECTIONS])
def test_methods_page_describes_every_registered_test_and_correction(name):
    assert f"`{name}`" in METHODS_PAGE.read_text(encoding="utf-8")


@pytest.mark.parametrize("test", list(TRIAL_TESTS))
def test_every_registered_test_runs_with_a_pvalue_correction(test):
    rng = np.random.default_rng(4)
    a, b = rng.standard_normal((12, 5)), rng.standard_normal((14, 5))
    settings = ComparisonSettings(test=test, correction="holm", alpha=0.05, n_permutations=50, seed=1)
    result = compare_channels(a, b, settings)
    assert result.pvalue.shape == result.p_adjusted.shape == (5,)
    assert (result.p_adjusted >= result.pvalue).all()


def test_max_stat_without_a_test_that_gives_it_is_refused():
    settings = ComparisonSettings(test="welch", correction="max_stat", alpha=0.05, n_permutations=50, seed=1)
    with pytest.raises(ValueError, match="needs test 'permutation'"):
        compare_channels(np.zeros((3, 2)), np.ones((3, 2)), settings)
