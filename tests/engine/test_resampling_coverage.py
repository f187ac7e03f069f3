"""The per-entry resampling intervals cover what they claim, in seeded simulation.

The targets are expectations at the observed trial counts, estimated from many fresh data
sets of the same design (tests/benchmarks/calibration/resampling.py; larger runs there).
The tolerance is the issue's 95 ± 3 %: about 2.7 binomial standard errors at 400 data sets
(common practice for a seeded check that must not flicker when the numbers are right). Measured
here: 0.96 for the fraction's interval, 0.93 for mean_welch_t's. The benchmark shows that the
fraction's interval covers less (0.91–0.92) with 32 channels at 20–40 trials: this test pins one
design, it does not prove coverage in general (docs/methods.md says so).
"""

import pytest

from tests.benchmarks.calibration.resampling import (
    Design,
    all_mode_fraction_coverage,
    fixed_mode_spread_coverage,
    mean_welch_t_coverage,
)

N_SETS = 400
RESAMPLES = 400
TRUTH_SETS = 20_000
DESIGN = Design(trials=(40, 35), n_channels=16)


def test_all_mode_percentile_interval_covers_the_expected_fraction_95_percent():
    coverage = all_mode_fraction_coverage(DESIGN, n_sets=N_SETS, resamples=RESAMPLES, truth_sets=TRUTH_SETS, seed=5)
    assert abs(coverage.coverage - 0.95) <= 0.03, coverage.line()


@pytest.mark.parametrize("peak_effect", [0.0, 0.6], ids=["no effect", "effect"])
def test_mean_welch_t_interval_covers_its_expectation_at_n_95_percent(peak_effect):
    design = Design(trials=(40, 35), n_channels=16, peak_effect=peak_effect)
    coverage = mean_welch_t_coverage(design, n_sets=N_SETS, resamples=RESAMPLES, truth_sets=TRUTH_SETS, seed=6)
    assert abs(coverage.coverage - 0.95) <= 0.03, coverage.line()


def test_fixed_mode_spread_is_no_confidence_interval_its_coverage_falls_as_k_nears_n():
    # k = 30 of n = 32: subsets overlap almost wholly, so the spread is narrow and misses the
    # expected fraction at k far more often than 5 % of the time; the subset mean stays unbiased.
    spread, bias = fixed_mode_spread_coverage(
        Design(trials=(32, 32), n_channels=16), k=30, n_sets=200, resamples=200, truth_sets=TRUTH_SETS, seed=7
    )
    assert spread.coverage < 0.8, spread.line()
    # Monte Carlo error of the mean of 200 subset means, whose SD over data sets is below 0.2.
    assert abs(bias) < 3 * 0.2 / 200**0.5
