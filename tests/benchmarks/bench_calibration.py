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
Per entry (``tests/benchmarks/calibration/resampling.py``, another module): printed when present.

Every figure is a share over n simulated studies; ``± 2 SE`` is two binomial standard errors.

    python tests/benchmarks/bench_calibration.py          # about 2-3 minutes on 2 cores
    python tests/benchmarks/bench_calibration.py --quick  # smoke run
"""

import argparse
import importlib
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np

from tests.benchmarks.calibration.comparisons import (
    blind_selection_null,
    factor_false_positives,
    guard_coverage,
    intercept_only_false_positives,
    ranking_null,
)


def share(value: float, n: int) -> str:
    return f"{value:.3f} ± {2 * np.sqrt(max(value * (1 - value), 1e-12) / n):.3f} (n={n})"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny sizes, a smoke run")
    quick = parser.parse_args().quick
    started = time.perf_counter()

    n = 20 if quick else 400
    ranking = ranking_null(n, n_pipelines=64, n_subjects=16, n_sign_flips=2**16, seed=11)
    print("Rankings: 64 pipelines of equal merit, 16 subjects, exact max-t over all 65536 sign patterns")
    print(f"  family-wise error of p_adjusted < 0.05         {share(ranking.family_wise_error, n)}   nominal 0.05")
    print(f"  top pipeline beats reference, unadjusted p     {share(ranking.top_unadjusted_rate, n)}")
    print(f"  top pipeline's 95 % t interval covers its mean {share(ranking.top_interval_coverage, n)}")

    n = 20 if quick else 1000
    new = factor_false_positives(n, n_subjects=12, seed=12)
    old = intercept_only_false_positives(20 if quick else 300, n_subjects=12, seed=12)
    print("Factor effects: 12 subjects, 2×3×2 grid, every factor's effect varies between subjects, mean zero")
    for factor in new:
        print(
            f"  factor {factor}: p < 0.05 per-subject contrasts {share(new[factor], n)}"
            f"   random-intercept-only model {share(old[factor], 20 if quick else 300)}"
        )

    n = 4 if quick else 300
    blind = blind_selection_null(n, n_subjects=12, seed=13)
    print("Contrast-blind selection: 4 pipelines (real steps) on a slow ERP under pink noise, no condition difference")
    print(f"  winner by collapsed_snr: group test p < 0.05   {share(blind.blind_winner_rate, n)}   nominal 0.05")
    print(f"  winner by significant fraction: same test      {share(blind.circular_winner_rate, n)}")
    print(f"  collapsed_snr chose the 4 Hz high-pass         {share(blind.blind_chose_highpass_4, n)}")

    n = 20 if quick else 2000
    guard = guard_coverage(n, seed=14)
    print("Selection guard: 16 pipelines, 24 subjects split 12/12, held-out 95 % t intervals")
    print(f"  coverage: winner's mean {share(guard.winner, n)}, reference's mean {share(guard.reference, n)}")
    print(f"  coverage: winner minus reference {share(guard.difference, n)}")
    print(
        f"  null: held-out paired p < 0.05 {share(guard.null_paired_rate, n)}; mean optimism {guard.null_mean_optimism:.3f}"
    )

    try:
        resampling = importlib.import_module("tests.benchmarks.calibration.resampling")
    except ModuleNotFoundError:
        print("Per-entry resampling: tests/benchmarks/calibration/resampling.py is not in this tree; no figures")
    else:
        if hasattr(resampling, "print_figures"):
            resampling.print_figures(quick=quick)
        else:
            print("Per-entry resampling: resampling.py has no print_figures(quick=...) to call; no figures")
    print(f"wall time {time.perf_counter() - started:.1f} s")


if __name__ == "__main__":
    main()
