"""Factor effects: the MixedLM wrapper against statsmodels' formula interface, the bounded-metric
transform, and effects pointing the way simulated drift predicts."""

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf

from epoch_assay.demo.simulate import SimulationConfig, simulate_subject
from epoch_assay.engine.factor_effects import build_design, factor_effects
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


def statsmodels_fit(table: MetricTable):
    rows = [
        {"y": table.values[p, s], "f": PIPELINE_LEVELS[name]["f"], "g": PIPELINE_LEVELS[name]["g"], "subject": subject}
        for p, name in enumerate(table.pipelines)
        for s, subject in enumerate(table.subjects)
    ]
    frame = pd.DataFrame(rows)
    formula = "y ~ C(f, Treatment('lo')) + C(g, Treatment('x'))"
    return smf.mixedlm(formula, frame, groups=frame["subject"]).fit(reml=True)


def test_level_estimates_and_intervals_match_statsmodels_formula_fit():
    effects = factor_effects(synthetic_table(), PIPELINE_LEVELS, FACTOR_LEVELS)
    # Reference: statsmodels mixedlm with treatment coding and conf_int (Seabold & Perktold, 2010)
    fit = statsmodels_fit(synthetic_table())
    intervals = fit.conf_int()
    for factor, baseline, level in [("f", "lo", "mid"), ("f", "lo", "hi"), ("g", "x", "y")]:
        name = f"C({factor}, Treatment('{baseline}'))[T.{level}]"
        effect = effects.factors[factor].levels[level]
        np.testing.assert_allclose(effect.estimate, fit.params[name], rtol=1e-6)
        np.testing.assert_allclose([effect.ci_low, effect.ci_high], intervals.loc[name], rtol=1e-5)


def test_factor_p_matches_statsmodels_joint_wald_test():
    effects = factor_effects(synthetic_table(), PIPELINE_LEVELS, FACTOR_LEVELS)
    fit = statsmodels_fit(synthetic_table())
    names = list(fit.params.index)
    restriction = np.zeros((2, len(names)))
    restriction[0, names.index("C(f, Treatment('lo'))[T.mid]")] = 1.0
    restriction[1, names.index("C(f, Treatment('lo'))[T.hi]")] = 1.0
    # Reference: statsmodels wald_test, chi-square form (Seabold & Perktold, 2010)
    expected = fit.wald_test(restriction, use_f=False, scalar=True).pvalue
    np.testing.assert_allclose(effects.factors["f"].p, expected, rtol=1e-5)


def test_baseline_level_reports_zero_effect():
    effects = factor_effects(synthetic_table(), PIPELINE_LEVELS, FACTOR_LEVELS)
    assert effects.factors["g"].baseline_level == "x"
    assert effects.factors["g"].levels["x"].estimate == 0.0


def test_fraction_metric_is_analysed_after_arcsine_square_root():
    table = MetricTable(
        "significant_fraction",
        PIPELINES,
        SUBJECTS,
        np.random.default_rng(2).uniform(0, 1, (len(PIPELINES), len(SUBJECTS))),
    )
    design = build_design(table, PIPELINE_LEVELS, FACTOR_LEVELS)
    # Bartlett (1947); Anscombe (1948): arcsine square root transform of a proportion
    np.testing.assert_allclose(np.sort(design.response), np.sort(np.arcsin(np.sqrt(table.values.ravel()))))
    assert factor_effects(table, PIPELINE_LEVELS, FACTOR_LEVELS).scale == "arcsine_sqrt"


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


def test_high_pass_raises_the_significant_fraction_when_some_subjects_drift():
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
    effects = factor_effects(
        table,
        {p.pipeline.name: p.levels for p in points},
        {factor: list(levels) for factor, levels in DRIFT_GRID.factors.items()},
    )
    assert effects.factors["highpass"].levels["1"].ci_low > 0.0
