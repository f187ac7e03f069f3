"""Error rates and coverages of the across-subject verdicts in seeded null simulations.

Each check allows the nominal 5 % plus two binomial standard errors over the simulated
studies (a share of n independent studies has SE √(0.05·0.95/n); common practice for
Monte Carlo error). The simulations live in ``tests.benchmarks.calibration.comparisons``,
where the calibration benchmark runs them at larger sizes.
"""

import pytest

from tests.benchmarks.calibration.comparisons import (
    binomial_bound,
    blind_selection_null,
    factor_false_positives,
    guard_coverage,
    ranking_null,
)


@pytest.mark.slow
def test_adjusted_p_holds_the_family_wise_error_over_64_correlated_pipelines():
    # 64 pipelines of equal merit, 16 subjects, 2000 random sign patterns (a valid Monte Carlo test,
    # p = (1 + count) / 2001; Phipson & Smyth, 2010). Max-t controls the family-wise error (Westfall &
    # Young, 1993): the share of studies with any p_adjusted < 0.05 is at most 5 %.
    result = ranking_null(300, n_pipelines=64, n_subjects=16, n_sign_flips=2000, seed=1)
    assert result.family_wise_error <= binomial_bound(300)


def test_adjusted_p_holds_the_family_wise_error_over_32_correlated_pipelines():
    result = ranking_null(100, n_pipelines=32, n_subjects=16, n_sign_flips=1000, seed=2)
    assert result.family_wise_error <= binomial_bound(100)


def test_factor_with_subject_specific_effects_and_zero_mean_holds_its_error_rate():
    # 12 subjects, 2×3×2 grid, every factor's effect varies between subjects around zero
    # (the design in which a random-intercept-only model inflates; Barr et al., 2013).
    rates = factor_false_positives(400, n_subjects=12, seed=3)
    assert all(rate <= binomial_bound(400) for rate in rates.values()), rates


def test_held_out_intervals_of_the_selection_guard_cover_the_true_means():
    # Student t intervals over held-out subjects, who did not choose the winner: coverage 0.95
    # (Student, 1908), within two binomial SE of 400 studies.
    result = guard_coverage(400, seed=4)
    floor = 0.95 - (binomial_bound(400) - 0.05)
    assert min(result.winner, result.reference, result.difference) >= floor, result
    assert result.null_paired_rate <= binomial_bound(400)


@pytest.mark.slow
def test_testing_the_contrast_blind_winner_holds_the_false_positive_rate():
    # Real filter and baseline steps on simulated epochs without a condition difference; the winner's
    # group test is scipy.stats.ttest_1samp over subjects of its channel-mean difference.
    result = blind_selection_null(80, n_subjects=8, seed=5)
    assert result.blind_winner_rate <= binomial_bound(80)
