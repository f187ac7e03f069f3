"""Calibration of the scores on data simulated with the demo's head model (seeded).

No true effect: the uncorrected significant fraction averages about alpha and the
family-wise false-positive rate of max_stat is about alpha. A known effect: the bootstrap
percentile interval (mode "all") covers the true expected fraction about 95 % of the time.
Tolerances come from the binomial error of the number of simulated data sets.
"""

import numpy as np
import pytest

from epoch_assay.demo.simulate import SimulationConfig, simulate_subject
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import BootstrapSpec, ScoringSpec
from epoch_assay.engine.stats import adjust_pvalues, welch_t, window_means

ALPHA = 0.05
WINDOW_S = (0.3, 0.5)
CONDITIONS = ("incongruent", "congruent")
SMALL = dict(n_trials_per_condition=30, tmin=-0.1, tmax=0.6, sfreq=125.0)
N_NULL_SETS = 200
# Binomial standard error of a rate near 0.05 over the data sets; with channels correlated by
# volume conduction the mean fraction is no more variable than one Bernoulli per data set, so
# this bounds its error too. Three standard errors either side (common practice).
NULL_TOLERANCE = 3 * np.sqrt(ALPHA * (1 - ALPHA) / N_NULL_SETS)


@pytest.fixture(scope="module")
def null_sets():
    config = SimulationConfig(effect_uv=0.0, seed=11, **SMALL)
    return [simulate_subject(config, index) for index in range(N_NULL_SETS)]


@pytest.mark.slow
def test_uncorrected_fraction_without_effect_averages_alpha(null_sets):
    spec = ScoringSpec(conditions=CONDITIONS, window_s=WINDOW_S, alpha=ALPHA, correction="none", time_course=None)
    fractions = [score_epochs(epochs, spec).significant_fraction for epochs in null_sets]
    assert abs(np.mean(fractions) - ALPHA) < NULL_TOLERANCE


@pytest.mark.slow
def test_max_stat_family_wise_rate_without_effect_is_about_alpha(null_sets):
    spec = ScoringSpec(
        conditions=CONDITIONS,
        window_s=WINDOW_S,
        alpha=ALPHA,
        test="permutation",
        correction="max_stat",
        n_permutations=200,
        time_course=None,
    )
    any_significant = [
        score_epochs(epochs, spec.model_copy(update={"seed": index})).significant_fraction > 0
        for index, epochs in enumerate(null_sets)
    ]
    assert abs(np.mean(any_significant) - ALPHA) < NULL_TOLERANCE


N_COVERAGE_SETS = 100
N_TRUTH_SETS = 200


def fdr_fraction(epochs):
    means = window_means(epochs.data, epochs.times, WINDOW_S)[:, epochs.picks()]
    first, second = (means[epochs.labels == label] for label in CONDITIONS)
    return float((adjust_pvalues(welch_t(first, second).pvalue, "fdr_bh") < ALPHA).mean())


@pytest.mark.slow
def test_bootstrap_percentile_interval_covers_the_true_fraction_about_95_percent():
    # One population for every simulated data set (no between-subject spread), so the true
    # fraction is the expected fraction of a data set of this size: estimated from fresh sets.
    config = SimulationConfig(effect_uv=8.0, subject_spread=0.0, subject_effect_sd=0.0, seed=12, **SMALL)
    truth = np.mean([fdr_fraction(simulate_subject(config, 10_000 + index)) for index in range(N_TRUTH_SETS)])
    spec = ScoringSpec(
        conditions=CONDITIONS,
        window_s=WINDOW_S,
        alpha=ALPHA,
        correction="fdr_bh",
        time_course=None,
        bootstrap=BootstrapSpec(mode="all", resamples=200, seed=1),
    )
    covered = []
    for index in range(N_COVERAGE_SETS):
        summary = score_epochs(simulate_subject(config, index), spec).bootstrap
        covered.append(summary.ci_low <= truth <= summary.ci_high)
    # Binomial error of a 95 % rate over the data sets, three standard errors (common practice).
    assert abs(np.mean(covered) - 0.95) < 3 * np.sqrt(0.95 * 0.05 / N_COVERAGE_SETS)
