"""Factor effects: per-subject contrasts tested across subjects, against scipy and statsmodels on the
same contrasts, and effects pointing the way simulated drift predicts."""

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.multivariate.manova import MANOVA
from statsmodels.stats import multivariate as sm_multivariate
from statsmodels.stats.weightstats import DescrStatsW

from epoch_assay.demo.simulate import SimulationConfig, simulate_subject
from epoch_assay.engine.factor_effects import factor_effects, hotelling_one_sample, subject_contrasts
from epoch_assay.engine.grid import GridSpec, expand_grid
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.subject_metrics import MetricTable, metric_table
from epoch_assay.engine.tree import build_tree, execute_tree

FACTOR_LEVELS = {"f": ["lo", "mid", "hi"], "g": ["x", "y"]}
PIPELINE_LEVELS = {f"f={f},g={g}": {"f": f, "g": g} for f in FACTOR_LEVELS["f"] for g in FACTOR_LEVELS["g"]}
PIPELINES = tuple(PIPELINE_LEVELS)
SUBJECTS = tuple(f"s{i}" for i in range(8))


def synthetic_table(metric: str = "trials_kept") -> MetricTable:
    rng = np.random.default_rng(9)
    f_effect = {"lo": 0.0, "mid": 1.0, "hi": 2.5}
    g_effect = {"x": 0.0, "y": -0.7}
    subject_level = rng.normal(0.0, 2.0, len(SUBJECTS))
    values = (
        np.array(
            [
                [
                    f_effect[PIPELINE_LEVELS[p]["f"]]
                    + g_effect[PIPELINE_LEVELS[p]["g"]]
                    + subject_level[s]
                    + rng.normal(0.0, 0.5)
                    for s in range(len(SUBJECTS))
                ]
                for p in PIPELINES
            ]
        )
        + 10.0
    )
    return MetricTable(metric, PIPELINES, SUBJECTS, values)


def contrasts_by_pandas(table: MetricTable, factor: str) -> pd.DataFrame:
    """Per subject (rows), each level's mean over the other factors minus the first level's, by pandas."""
    frame = pd.DataFrame(
        [
            {"y": table.values[p, s], "level": PIPELINE_LEVELS[name][factor], "subject": subject}
            for p, name in enumerate(table.pipelines)
            for s, subject in enumerate(table.subjects)
        ]
    )
    means = frame.pivot_table(index="subject", columns="level", values="y", aggfunc="mean")[FACTOR_LEVELS[factor]]
    return means.iloc[:, 1:].sub(means.iloc[:, 0], axis=0)


def test_level_estimates_and_intervals_match_scipy_one_sample_t_on_subject_contrasts():
    table = synthetic_table()
    effects = factor_effects(table, PIPELINE_LEVELS, FACTOR_LEVELS)
    contrasts = contrasts_by_pandas(table, "f")
    for level in ("mid", "hi"):
        # Reference: scipy.stats.ttest_1samp and its confidence_interval (Virtanen et al., 2020, SciPy 1.0)
        test = stats.ttest_1samp(contrasts[level].to_numpy(), 0.0)
        ci = test.confidence_interval(0.95)
        found = effects.factors["f"].levels[level]
        np.testing.assert_allclose(
            [found.estimate, found.ci_low, found.ci_high, found.t, found.p],
            [contrasts[level].mean(), ci.low, ci.high, test.statistic, test.pvalue],
        )


def test_level_interval_matches_statsmodels_descr_stats_w():
    table = synthetic_table()
    found = factor_effects(table, PIPELINE_LEVELS, FACTOR_LEVELS).factors["g"].levels["y"]
    # Reference: statsmodels DescrStatsW.tconfint_mean (Seabold & Perktold, 2010)
    low, high = DescrStatsW(contrasts_by_pandas(table, "g")["y"].to_numpy()).tconfint_mean(0.05)
    np.testing.assert_allclose([found.ci_low, found.ci_high], [low, high])


def test_two_level_factor_p_is_the_one_sample_t_p():
    table = synthetic_table()
    factor = factor_effects(table, PIPELINE_LEVELS, FACTOR_LEVELS).factors["g"]
    # Reference: scipy.stats.ttest_1samp (Virtanen et al., 2020, SciPy 1.0)
    assert factor.test == "one-sample t"
    assert factor.p == pytest.approx(stats.ttest_1samp(contrasts_by_pandas(table, "g")["y"], 0.0).pvalue)


def test_three_level_factor_p_matches_statsmodels_hotelling_test():
    table = synthetic_table()
    factor = factor_effects(table, PIPELINE_LEVELS, FACTOR_LEVELS).factors["f"]
    # Reference: statsmodels.stats.multivariate.test_mvmean, one-sample Hotelling T² in F form (Seabold &
    # Perktold, 2010; Mardia, Kent & Bibby, 1979, §5.2)
    reference = sm_multivariate.test_mvmean(contrasts_by_pandas(table, "f").to_numpy(), np.zeros(2))
    assert factor.test == "Hotelling T²"
    assert (factor.statistic, factor.p) == (pytest.approx(reference.statistic), pytest.approx(reference.pvalue))
    assert factor.df == (2.0, 6.0)


def test_hotelling_p_matches_statsmodels_manova_intercept_test():
    rng = np.random.default_rng(3)
    contrasts = rng.normal(0.3, 1.0, size=(10, 3))
    found = hotelling_one_sample(contrasts)
    # Reference: statsmodels MANOVA, Hotelling-Lawley trace of the intercept (exact F for one hypothesis
    # degree of freedom), y1 + y2 + y3 ~ 1 (Seabold & Perktold, 2010)
    frame = pd.DataFrame(contrasts, columns=["y1", "y2", "y3"])
    table = MANOVA.from_formula("y1 + y2 + y3 ~ 1", frame).mv_test().results["Intercept"]["stat"]
    assert found.p == pytest.approx(table.loc["Hotelling-Lawley trace", "Pr > F"])
    assert found.f == pytest.approx(table.loc["Hotelling-Lawley trace", "F Value"])


def test_estimates_are_in_the_metrics_own_unit_for_a_bounded_metric():
    table = synthetic_table()
    fractions = MetricTable("significant_fraction", table.pipelines, table.subjects, table.values / 20.0)
    effects = factor_effects(fractions, PIPELINE_LEVELS, FACTOR_LEVELS)
    assert effects.scale == "identity"
    assert effects.factors["f"].levels["hi"].estimate == pytest.approx(contrasts_by_pandas(fractions, "f")["hi"].mean())


def test_baseline_level_reports_zero_effect():
    level = factor_effects(synthetic_table(), PIPELINE_LEVELS, FACTOR_LEVELS).factors["f"].levels["lo"]
    assert (level.estimate, level.ci_low, level.ci_high) == (0.0, 0.0, 0.0)


def test_a_subject_missing_a_pipeline_keeps_its_other_contrasts():
    table = synthetic_table()
    values = table.values.copy()
    values[PIPELINES.index("f=hi,g=x"), 0] = np.nan
    values[PIPELINES.index("f=hi,g=y"), 0] = np.nan
    effects = factor_effects(MetricTable(table.metric, PIPELINES, SUBJECTS, values), PIPELINE_LEVELS, FACTOR_LEVELS)
    assert effects.factors["f"].levels["hi"].n_subjects == 7
    assert effects.factors["f"].levels["mid"].n_subjects == 8
    assert effects.factors["f"].n_subjects == 7


def test_too_few_subjects_for_hotelling_leave_no_omnibus_p_and_say_why():
    table = synthetic_table().for_subjects(["s0", "s1"])
    effects = factor_effects(table, PIPELINE_LEVELS, FACTOR_LEVELS)
    assert np.isnan(effects.factors["f"].p)
    assert any("Hotelling" in warning for warning in effects.warnings)


def test_a_constant_metric_is_refused_with_the_reason():
    table = MetricTable("trials_kept", PIPELINES, SUBJECTS, np.full((len(PIPELINES), len(SUBJECTS)), 80.0))
    with pytest.raises(ValueError, match="same for every pipeline"):
        factor_effects(table, PIPELINE_LEVELS, FACTOR_LEVELS)


DRIFT_GRID = GridSpec(
    factors={
        "highpass": {"none": [], "1": [{"step": "highpass", "cutoff_hz": 1.0}]},
        "reference": {
            "average": [{"step": "reference", "kind": "average"}],
            "mastoids": [{"step": "reference", "kind": "channels", "channels": ["TP9", "TP10"]}],
        },
    }
)


def test_high_pass_raises_the_significant_fraction_in_the_subjects_that_drift():
    # Drift adds a slow offset that differs between trials; it inflates the variance of window means
    # and so lowers t, unless a high-pass filter removes it. Subjects 1-3 drift strongly, 4-6 not at all.
    config = SimulationConfig(n_trials_per_condition=40, effect_uv=8.0, blink_rate=0.0, line_noise_uv=0.0, seed=11)
    scoring = ScoringSpec(conditions=("incongruent", "congruent"), window_s=(0.3, 0.5), correction="none")
    points = expand_grid(DRIFT_GRID)
    tree = build_tree([point.pipeline for point in points])
    entries = []
    for subject in range(1, 7):
        epochs = simulate_subject(replace(config, drift_uv=80.0 if subject <= 3 else 0.0), subject)
        for leaf in execute_tree(tree, epochs, f"{subject:064x}"):
            entries.append(
                {
                    "pipeline": leaf.pipeline.name,
                    "subject": f"sub-{subject}",
                    **score_epochs(leaf.epochs, scoring).model_dump(mode="json"),
                }
            )
    table = metric_table(entries, "significant_fraction", [point.pipeline.name for point in points])
    levels = {p.pipeline.name: p.levels for p in points}
    factors = {factor: list(levels) for factor, levels in DRIFT_GRID.factors.items()}
    contrasts = subject_contrasts(table, levels, "highpass", factors["highpass"])[:, 0]
    assert contrasts[:3].mean() > contrasts[3:].mean()
    # An effect in half of six subjects is not a population effect a test across subjects can confirm.
    assert factor_effects(table, levels, factors).factors["highpass"].levels["1"].estimate > 0.0
