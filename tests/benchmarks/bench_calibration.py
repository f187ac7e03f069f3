"""Calibration of the service's verdicts, from seeded simulations: error rates and coverages.

Across subjects (``tests/benchmarks/calibration/comparisons.py``):
- family-wise error of ``p_adjusted`` (max-t sign flips) over many correlated pipelines of
  equal merit, beside the share of studies whose top-ranked pipeline "beats" the reference
  at unadjusted p < 0.05 and the coverage of that pipeline's own t interval;
- false-positive rate of factor effects when every factor's effect varies between subjects
  around zero: per-subject contrasts (the engine) against the replaced random-intercept-only
  mixed model;
- false-positive rate of the winner's group test after a contrast-blind selection on data
  without a condition difference (real filter and baseline steps), beside the winner by
  significant fraction;
- coverage of the selection guard's held-out intervals, and the held-out paired test's
  false-positive rate with its mean optimism.
Per entry (``tests/benchmarks/calibration/resampling.py``): coverage of the all-mode interval of the
significant fraction and of the mean Welch t's interval, and the fixed-mode spread shown for contrast.

Every figure is a share over n simulated studies; ``± 2 SE`` is two binomial standard errors.

    python tests/benchmarks/bench_calibration.py          # aimed at under 3 minutes on 2 idle cores
    python tests/benchmarks/bench_calibration.py --quick  # smoke run
"""

import argparse
import sys
import time
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np

from tests.benchmarks.calibration import resampling
from tests.benchmarks.calibration.comparisons import (
    blind_selection_null,
    factor_false_positives,
    guard_coverage,
    intercept_only_false_positives,
    ranking_null,
)


@dataclass(frozen=True)
class Sizes:
    """Simulated studies per figure."""

    ranking_exact: int
    ranking_monte_carlo: int
    factors: int
    factors_old_model: int
    blind_selection: int
    guard: int


FULL = Sizes(
    ranking_exact=100, ranking_monte_carlo=1000, factors=2000, factors_old_model=200, blind_selection=150, guard=2000
)
QUICK = Sizes(ranking_exact=3, ranking_monte_carlo=5, factors=10, factors_old_model=3, blind_selection=1, guard=10)


def share(value: float, n: int) -> str:
    return f"{value:.3f} ± {2 * np.sqrt(max(value * (1 - value), 1e-12) / n):.3f} (n={n})"


def section(title: str, started: float) -> float:
    now = time.perf_counter()
    print(f"{title} [{now - started:.1f} s]")
    return now


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny sizes, a smoke run")
    sizes = QUICK if parser.parse_args().quick else FULL
    began = started = time.perf_counter()

    n = sizes.ranking_exact
    exact = ranking_null(n, n_pipelines=32, n_subjects=12, seed=11)
    n_mc = sizes.ranking_monte_carlo
    monte_carlo = ranking_null(n_mc, n_pipelines=64, n_subjects=16, n_sign_flips=2000, seed=12)
    started = section("Rankings: pipelines of equal merit, correlated across subjects; reference = first", started)
    print(
        f"  32 pipelines, 12 subjects, exact max-t (4096 sign patterns): any p_adjusted < 0.05 {share(exact.family_wise_error, n)}"
    )
    print(
        f"  64 pipelines, 16 subjects, 2000 random sign patterns:      any p_adjusted < 0.05 {share(monte_carlo.family_wise_error, n_mc)}"
    )
    print(
        f"    top-ranked pipeline beats the reference at unadjusted p < 0.05       {share(monte_carlo.top_unadjusted_rate, n_mc)}"
    )
    print(
        f"    top-ranked pipeline's own 95 % t interval covers its true mean       {share(monte_carlo.top_interval_coverage, n_mc)}"
    )

    n, n_old = sizes.factors, sizes.factors_old_model
    new = factor_false_positives(n, n_subjects=12, seed=13)
    old = intercept_only_false_positives(n_old, n_subjects=12, seed=13)
    started = section(
        "Factor effects: 12 subjects, 2×3×2 grid, each factor's effect varies between subjects, mean zero", started
    )
    for factor in new:
        print(
            f"  factor {factor}: p < 0.05 with per-subject contrasts {share(new[factor], n)}; "
            f"random-intercept-only mixed model {share(old[factor], n_old)}"
        )

    n = sizes.blind_selection
    blind = blind_selection_null(n, n_subjects=8, seed=14)
    started = section(
        "Contrast-blind selection: 4 pipelines (real steps), slow ERP under pink noise, no condition difference, 8 subjects",
        started,
    )
    print(f"  winner by collapsed_snr: its group test p < 0.05       {share(blind.blind_winner_rate, n)}")
    print(f"  winner by significant fraction: the same test          {share(blind.circular_winner_rate, n)}")
    print(f"  collapsed_snr chose the 4 Hz high-pass                 {share(blind.blind_chose_highpass_4, n)}")

    n = sizes.guard
    guard = guard_coverage(n, seed=15)
    started = section(
        "Selection guard: 16 pipelines, 24 subjects split 12 tuning / 12 held out, 95 % t intervals", started
    )
    print(f"  held-out coverage of the winner's true mean          {share(guard.winner, n)}")
    print(f"  held-out coverage of the reference's true mean       {share(guard.reference, n)}")
    print(f"  held-out coverage of winner minus reference          {share(guard.difference, n)}")
    print(f"  equal merit: held-out paired p < 0.05                {share(guard.null_paired_rate, n)}")
    print(f"  equal merit: mean optimism, in the metric's unit     {guard.null_mean_optimism:.3f}")

    resampling.print_figures(quick=sizes is QUICK)
    print(f"wall time {time.perf_counter() - began:.1f} s")


if __name__ == "__main__":
    main()
