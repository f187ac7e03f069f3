"""Coverage of the per-entry resampling intervals, by seeded simulation of window means.

Every simulated data set is one entry: window means of two conditions on correlated
channels, some of which carry a condition difference. For each interval the service
reports, the functions here count how often it contains the quantity it claims to cover,
estimated once from many fresh data sets of the same design:

- ``all`` mode, percentile interval of the significant fraction: the expected fraction at
  the observed trial counts;
- the smooth score ``mean_welch_t``, percentile interval over trials resampled within
  condition: the expected mean Welch t at the observed trial counts;
- ``fixed`` mode, the 2.5 / 97.5 percentiles over subsets of k trials, shown for contrast:
  how often that *spread* contains the expected fraction at k trials, which the subset
  mean estimates. It is no confidence interval, and its "coverage" swings with k / n.

    python tests/benchmarks/calibration/resampling.py          # benchmark sizes (a few minutes)
    python tests/benchmarks/calibration/resampling.py --quick  # tiny smoke run
"""

import argparse
import sys
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[3]))

import numpy as np

from epoch_assay.engine.stats import (
    BootstrapResult,
    adjust_pvalues,
    bootstrap_mean_welch_t,
    bootstrap_significant_fraction,
    welch_t,
)

ALPHA = 0.05
CORRECTION = "fdr_bh"
NOMINAL = 0.95
NOISE_V = 5e-6
# Fresh data sets are drawn in batches of this many, all channels and trials at once.
_TRUTH_BATCH = 500


@dataclass(frozen=True)
class Design:
    """One simulated entry: trials per condition, channels and the condition difference.

    trials : trials of the first and second condition
    n_channels : channels; noise correlation between channels i and j is
        ``channel_correlation ** |i - j|`` (neighbours on a strip, a stand-in for volume conduction)
    peak_effect : the largest standardized difference (Cohen's d) of a channel; the effect
        falls off as a Gaussian over the channel index around a quarter of the strip, so
        channels range from strong to no effect
    """

    trials: tuple[int, int] = (40, 40)
    n_channels: int = 32
    channel_correlation: float = 0.6
    peak_effect: float = 0.6

    def effect_v(self) -> np.ndarray:
        """The condition difference of each channel, shape (n_channels,), in V."""
        index = np.arange(self.n_channels)
        centre, width = self.n_channels / 4, self.n_channels / 8
        return self.peak_effect * NOISE_V * np.exp(-0.5 * ((index - centre) / width) ** 2)

    def mixing(self) -> np.ndarray:
        """Cholesky factor of the channel correlation, shape (n_channels, n_channels)."""
        index = np.arange(self.n_channels)
        return np.linalg.cholesky(self.channel_correlation ** np.abs(index[:, None] - index[None, :]))

    def draw(self, rng: np.random.Generator, trials: tuple[int, int], n_sets: int) -> tuple[np.ndarray, np.ndarray]:
        """``n_sets`` data sets: arrays of shape (n_sets, trials[k], n_channels), in V."""
        mixing = self.mixing()
        first, second = (NOISE_V * rng.standard_normal((n_sets, count, self.n_channels)) @ mixing.T for count in trials)
        return first + self.effect_v(), second


@dataclass(frozen=True)
class Coverage:
    """How often an interval contained its target over simulated data sets.

    interval : what interval (or spread) was checked; target : what it should contain
    coverage : share of data sets whose interval contained the target
    binomial_se : sqrt(coverage (1 - coverage) / n_sets), the Monte Carlo error of ``coverage``
    mean_width : mean of high - low over data sets; truth : the target's value
    """

    interval: str
    target: str
    coverage: float
    n_sets: int
    binomial_se: float
    mean_width: float
    truth: float

    def line(self) -> str:
        return (
            f"{self.interval:<52} covers {self.target:<38} {self.coverage:6.3f} ± {self.binomial_se:.3f}"
            f"  (n={self.n_sets}, mean width {self.mean_width:.3f}, target {self.truth:.3f})"
        )


def _batches(total: int) -> Iterator[int]:
    for start in range(0, total, _TRUTH_BATCH):
        yield min(_TRUTH_BATCH, total - start)


def expected_fraction(design: Design, trials: tuple[int, int], n_sets: int, seed: int) -> float:
    """Mean significant fraction (Welch, Benjamini–Hochberg) over ``n_sets`` fresh data sets of ``trials``."""
    rng = np.random.default_rng(seed)
    total = 0.0
    for size in _batches(n_sets):
        first, second = design.draw(rng, trials, size)
        total += float((adjust_pvalues(welch_t(first, second).pvalue, CORRECTION) < ALPHA).mean(axis=-1).sum())
    return total / n_sets


def expected_mean_welch_t(design: Design, trials: tuple[int, int], n_sets: int, seed: int) -> float:
    """Mean over ``n_sets`` fresh data sets of the mean over channels of Welch's t."""
    rng = np.random.default_rng(seed)
    total = 0.0
    for size in _batches(n_sets):
        first, second = design.draw(rng, trials, size)
        total += float(welch_t(first, second).statistic.mean(axis=-1).sum())
    return total / n_sets


@dataclass(frozen=True)
class _Seeds:
    """Independent streams of one simulation: the data sets, the fresh sets behind the target, the resamples."""

    data: np.random.Generator
    truth: int
    resamples: np.ndarray

    @classmethod
    def of(cls, seed: int, n_sets: int) -> "_Seeds":
        data, truth, resamples = np.random.SeedSequence(seed).spawn(3)
        return cls(
            data=np.random.default_rng(data),
            truth=int(truth.generate_state(1)[0]),
            resamples=np.random.default_rng(resamples).integers(2**32, size=n_sets),
        )


def _coverage(interval: str, target: str, truth: float, bounds: np.ndarray) -> Coverage:
    """bounds : array, shape (n_sets, 2), low and high per data set."""
    covered = (bounds[:, 0] <= truth) & (truth <= bounds[:, 1])
    rate = float(covered.mean())
    return Coverage(
        interval=interval,
        target=target,
        coverage=rate,
        n_sets=len(bounds),
        binomial_se=float(np.sqrt(rate * (1 - rate) / len(bounds))),
        mean_width=float(np.mean(bounds[:, 1] - bounds[:, 0])),
        truth=truth,
    )


def all_mode_fraction_coverage(design: Design, *, n_sets: int, resamples: int, truth_sets: int, seed: int) -> Coverage:
    """Coverage of the ``all``-mode percentile interval of the fraction for the expected fraction at n."""
    seeds = _Seeds.of(seed, n_sets)
    truth = expected_fraction(design, design.trials, truth_sets, seeds.truth)
    first, second = design.draw(seeds.data, design.trials, n_sets)
    bounds = np.array(
        [
            [(result := _all_mode(a, b, resamples, int(stream))).percentile_low, result.percentile_high]
            for a, b, stream in zip(first, second, seeds.resamples, strict=True)
        ]
    )
    n_a, n_b = design.trials
    return _coverage(
        f"all mode, percentile interval of the fraction (n={n_a}/{n_b})", "the expected fraction at n", truth, bounds
    )


def _all_mode(a: np.ndarray, b: np.ndarray, resamples: int, seed: int) -> BootstrapResult:
    return bootstrap_significant_fraction(
        a, b, mode="all", resamples=resamples, seed=seed, alpha=ALPHA, correction=CORRECTION
    )


def mean_welch_t_coverage(design: Design, *, n_sets: int, resamples: int, truth_sets: int, seed: int) -> Coverage:
    """Coverage of the smooth score's percentile interval for the expected mean Welch t at n."""
    seeds = _Seeds.of(seed, n_sets)
    truth = expected_mean_welch_t(design, design.trials, truth_sets, seeds.truth)
    first, second = design.draw(seeds.data, design.trials, n_sets)
    bounds = np.array(
        [
            [(result := bootstrap_mean_welch_t(a, b, resamples=resamples, seed=int(stream))).ci_low, result.ci_high]
            for a, b, stream in zip(first, second, seeds.resamples, strict=True)
        ]
    )
    n_a, n_b = design.trials
    return _coverage(
        f"mean_welch_t, percentile interval (n={n_a}/{n_b}, d={design.peak_effect:g})",
        "the expected mean Welch t at n",
        truth,
        bounds,
    )


def fixed_mode_spread_coverage(
    design: Design, *, k: int, n_sets: int, resamples: int, truth_sets: int, seed: int
) -> tuple[Coverage, float]:
    """How often the fixed-mode spread at k contains the expected fraction at k, and the subset mean's bias.

    Returns the "coverage" of the spread (no confidence interval: shown for contrast) and the
    mean over data sets of subset mean minus the expected fraction at k (the subset mean
    estimates it without bias, up to Monte Carlo error).
    """
    seeds = _Seeds.of(seed, n_sets)
    truth = expected_fraction(design, (k, k), truth_sets, seeds.truth)
    first, second = design.draw(seeds.data, design.trials, n_sets)
    results = [
        bootstrap_significant_fraction(
            a,
            b,
            mode="fixed",
            trials_per_condition=k,
            resamples=resamples,
            seed=int(stream),
            alpha=ALPHA,
            correction=CORRECTION,
        )
        for a, b, stream in zip(first, second, seeds.resamples, strict=True)
    ]
    bounds = np.array([[result.percentile_low, result.percentile_high] for result in results])
    bias = float(np.mean([result.mean for result in results]) - truth)
    n_a, n_b = design.trials
    spread = _coverage(
        f"fixed mode k={k}, 2.5-97.5 % spread (n={n_a}/{n_b}, k/n={k / min(n_a, n_b):.2f})",
        "the expected fraction at k (not a CI)",
        truth,
        bounds,
    )
    return spread, bias


def print_figures(quick: bool) -> None:
    """Print the coverage of every per-entry interval, and the fixed-mode spread for contrast."""
    print("Per-entry resampling intervals")
    n_sets, resamples, truth_sets = (20, 50, 500) if quick else (1000, 1000, 40_000)
    print(f"coverage over {n_sets} seeded data sets per line, {resamples} resamples each, nominal {NOMINAL:.2f}")
    print(f"targets from {truth_sets} fresh data sets; Welch t, {CORRECTION}, alpha {ALPHA}")
    for trials in ((20, 20), (40, 35), (80, 80)):
        design = Design(trials=trials)
        print(
            all_mode_fraction_coverage(design, n_sets=n_sets, resamples=resamples, truth_sets=truth_sets, seed=1).line()
        )
    for trials, peak in (((20, 20), 0.6), ((40, 35), 0.0), ((40, 35), 0.6), ((80, 80), 0.3)):
        design = Design(trials=trials, peak_effect=peak)
        print(mean_welch_t_coverage(design, n_sets=n_sets, resamples=resamples, truth_sets=truth_sets, seed=2).line())
    k = 50
    for n in (55, 62, 100, 200):
        spread, bias = fixed_mode_spread_coverage(
            Design(trials=(n, n)), k=k, n_sets=n_sets, resamples=resamples, truth_sets=truth_sets, seed=3
        )
        print(f"{spread.line()}  subset-mean bias {bias:+.4f}")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="tiny smoke run")
    print_figures(parser.parse_args(argv).quick)


if __name__ == "__main__":
    main()
