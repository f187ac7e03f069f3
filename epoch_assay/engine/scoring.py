"""Score an epoch set: per-channel test of a window mean between two conditions, effect sizes,
measurement error, the significant fraction over time, its resampling and a smooth score."""

from typing import cast

import numpy as np

from epoch_assay.engine.document.entry import (
    STATISTIC_NAMES,
    BootstrapSummary,
    ChannelScore,
    FractionInterval,
    MeanWelchT,
    PipelineScore,
    SubsetSpread,
    TimeCourse,
)
from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.scoring_spec import ScoringSpec, TimeCourseSpec
from epoch_assay.engine.stats import (
    ComparisonSettings,
    bootstrap_mean_welch_t,
    bootstrap_significant_fraction,
    compare_channels,
    hedges_g,
    mean_welch_t,
    standardized_measurement_error,
    window_means,
)
from epoch_assay.engine.stats.bootstrap import ResampledTest
from epoch_assay.engine.units import v_to_uv


def eeg_channel_names(epochs: EpochSet) -> tuple[str, ...]:
    """Names of the EEG channels of ``epochs``, bad ones included: the channels a lab uploaded."""
    return tuple(epochs.ch_names[index] for index in epochs.picks(exclude_bads=False))


def score_epochs(
    epochs: EpochSet, spec: ScoringSpec, *, uploaded_eeg_channels: tuple[str, ...] | None = None
) -> PipelineScore:
    """Score ``epochs`` (data in V) on the contrast, window and test of ``spec``.

    Every trial of the two conditions enters the per-channel test. ``uploaded_eeg_channels``
    names the EEG channels of the epoch set as uploaded, before the pipeline dropped or
    flagged any; by default the EEG channels of ``epochs``, bad ones included. Raises
    ``SpecError`` located under ``("scoring", ...)`` when the epoch set, as a pipeline left
    it, cannot be scored: too few trials in a condition, a window outside the epoch, or no
    EEG channel.
    """
    try:
        spec.check(epochs.meta())
    except SpecError as error:
        raise error.prefixed("scoring") from None
    picks = epochs.picks()
    if picks.size == 0:
        raise SpecError(
            ("scoring",),
            "no channel is left to score: scoring uses EEG channels not marked bad, and this epoch set has none; "
            "mark fewer channels bad or keep EEG channels in the pipeline",
        )
    names = [epochs.ch_names[index] for index in picks]
    uploaded = eeg_channel_names(epochs) if uploaded_eeg_channels is None else uploaded_eeg_channels
    in_condition = [epochs.labels == label for label in spec.conditions]
    means = window_means(epochs.data, epochs.times, spec.window_s)[:, picks]
    first, second = (means[rows] for rows in in_condition)
    tests = compare_channels(first, second, spec.comparison())
    effect = hedges_g(first, second)
    sme = {
        label: v_to_uv(standardized_measurement_error(values))
        for label, values in zip(spec.conditions, (first, second), strict=False)
    }
    mean_diff = v_to_uv(first.mean(axis=0) - second.mean(axis=0))
    collapsed_mean = np.asarray(v_to_uv((first.mean(axis=0) + second.mean(axis=0)) / 2))
    first_sme, second_sme = (np.asarray(sme[label]) for label in spec.conditions)
    collapsed_sme = np.sqrt(first_sme**2 + second_sme**2) / 2
    channels = [
        ChannelScore(
            name=name,
            statistic=float(tests.statistic[i]),
            p=float(tests.pvalue[i]),
            p_adjusted=float(tests.p_adjusted[i]),
            significant=bool(tests.significant[i]),
            mean_diff_uv=float(mean_diff[i]),
            hedges_g=float(effect.g[i]),
            hedges_g_ci=[float(effect.ci_low[i]), float(effect.ci_high[i])],
            sme_uv={label: float(values[i]) for label, values in sme.items()},
            collapsed_mean_uv=float(collapsed_mean[i]),
            collapsed_sme_uv=float(collapsed_sme[i]),
        )
        for i, name in enumerate(names)
    ]
    uploaded_names = set(uploaded)
    significant_uploaded = sum(channel.significant for channel in channels if channel.name in uploaded_names)
    return PipelineScore(
        n_trials={
            label: int(np.count_nonzero(rows)) for label, rows in zip(spec.conditions, in_condition, strict=False)
        },
        statistic_name=STATISTIC_NAMES[spec.test],
        channels=channels,
        significant_fraction=float(tests.significant.mean()),
        significant_fraction_uploaded=significant_uploaded / len(uploaded) if uploaded else float("nan"),
        channels_kept=len(channels),
        channels_uploaded=len(uploaded),
        median_sme_uv={label: float(np.median(values)) for label, values in sme.items()},
        mean_welch_t=_mean_welch_t(first, second, names, spec),
        time_course=_time_course(epochs, picks, in_condition, spec.time_course, spec.comparison()),
        bootstrap=_bootstrap_summary(first, second, spec),
    )


def _time_course(
    epochs: EpochSet,
    picks: np.ndarray,
    in_condition: list[np.ndarray],
    spec: TimeCourseSpec | None,
    settings: ComparisonSettings,
) -> TimeCourse | None:
    """The test at every sample or bin, corrected across channels at each one.

    Bins of ``round(bin_s * sfreq)`` samples (at least one) start at the first sample; the
    last bin may be shorter.
    """
    if spec is None:
        return None
    width = 1 if spec.bin_s is None else max(1, round(spec.bin_s * epochs.sfreq))
    starts = np.arange(0, epochs.n_times, width)
    counts = np.diff(np.append(starts, epochs.n_times))
    # (n_trials, n_channels, n_bins), then bins lead so that each bin is one family of channels.
    binned = np.add.reduceat(epochs.data[:, picks, :], starts, axis=-1) / counts
    first, second = (np.moveaxis(binned[rows], -1, 0) for rows in in_condition)
    significant = compare_channels(first, second, settings).significant
    times = np.add.reduceat(epochs.times, starts) / counts
    return TimeCourse(
        bin_s=spec.bin_s,
        times_s=[round(float(time), 9) for time in times],
        significant_fraction=[float(value) for value in significant.mean(axis=-1)],
    )


def _bootstrap_summary(first: np.ndarray, second: np.ndarray, spec: ScoringSpec) -> BootstrapSummary | None:
    """The fraction over resamples: subset mean and spread (fixed, equalized) or percentile interval (all).

    first, second : arrays, shape (n_trials, n_channels), window means of the scored channels, in V
    """
    if spec.bootstrap is None:
        return None
    result = bootstrap_significant_fraction(
        first,
        second,
        mode=spec.bootstrap.mode,
        trials_per_condition=spec.bootstrap.trials_per_condition,
        resamples=spec.bootstrap.resamples,
        seed=spec.bootstrap.seed,
        alpha=spec.alpha,
        correction=spec.correction,
        # ScoringSpec refuses a bootstrap with a test that cannot be resampled (the permutation test).
        test=cast(ResampledTest, spec.test),
    )
    if result.mode == "all":
        return FractionInterval(
            mode="all",
            resamples=result.resamples,
            trials_drawn=dict(zip(spec.conditions, result.trials_drawn, strict=True)),
            ci="percentile",
            ci_low=result.percentile_low,
            ci_high=result.percentile_high,
        )
    kept = (first.shape[0], second.shape[0])
    return SubsetSpread(
        mode=result.mode,
        resamples=result.resamples,
        trials_per_condition=result.trials_drawn[0],
        share_of_trials_used={
            label: drawn / count for label, drawn, count in zip(spec.conditions, result.trials_drawn, kept, strict=True)
        },
        subset_mean=result.mean,
        spread_low=result.percentile_low,
        spread_high=result.percentile_high,
    )


def _mean_welch_t(first: np.ndarray, second: np.ndarray, names: list[str], spec: ScoringSpec) -> MeanWelchT:
    """The smooth score over the scored channels, or over those of ``spec.mean_t_channels`` that are scored.

    first, second : arrays, shape (n_trials, n_channels), window means of the scored channels, in V
    """
    wanted = set(names) if spec.mean_t_channels is None else set(spec.mean_t_channels)
    columns = [index for index, name in enumerate(names) if name in wanted]
    if not columns:
        return MeanWelchT(value=None, n_channels=0, ci_low=None, ci_high=None, resamples=0)
    a, b = first[:, columns], second[:, columns]
    if spec.bootstrap is None:
        return MeanWelchT(value=mean_welch_t(a, b), n_channels=len(columns), ci_low=None, ci_high=None, resamples=0)
    resampled = bootstrap_mean_welch_t(a, b, resamples=spec.bootstrap.resamples, seed=spec.bootstrap.seed)
    return MeanWelchT(
        value=resampled.observed,
        n_channels=len(columns),
        ci_low=resampled.ci_low,
        ci_high=resampled.ci_high,
        resamples=resampled.resamples,
    )
