"""Seeded simulations of the across-subject verdicts: adjusted rankings, factor effects,
contrast-blind selection and the selection guard.

Each function runs ``n_studies`` simulated studies and returns rates or coverages; the
fast tests in ``tests/engine/test_comparison_calibration.py`` call them at small sizes,
``tests/benchmarks/bench_calibration.py`` at larger ones. All data are invented here.
"""

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.factor_effects import factor_effects
from epoch_assay.engine.multiverse_report import selection_document
from epoch_assay.engine.pipeline import PipelineSpec, apply_pipeline
from epoch_assay.engine.ranking import rank_pipelines
from epoch_assay.engine.scoring import score_epochs
from epoch_assay.engine.scoring_spec import ScoringSpec
from epoch_assay.engine.selection import ContrastBlindSpec, tuning_holdout
from epoch_assay.engine.subject_metrics import MetricTable, metric_table

ALPHA = 0.05
MICROVOLT = 1e-6


def binomial_bound(n_studies: int, rate: float = ALPHA) -> float:
    """rate plus two binomial standard errors of a share over ``n_studies`` studies."""
    return rate + 2.0 * float(np.sqrt(rate * (1.0 - rate) / n_studies))


# --- rankings ------------------------------------------------------------------------


@dataclass(frozen=True)
class RankingNull:
    """Over null studies: share with any p_adjusted < alpha (family-wise error), share whose
    top-ranked pipeline has unadjusted paired p < alpha, and coverage of the top pipeline's
    95 % t interval of its true mean (the winner's curse)."""

    n_studies: int
    family_wise_error: float
    top_unadjusted_rate: float
    top_interval_coverage: float


def null_pipeline_table(rng: np.random.Generator, n_pipelines: int, n_subjects: int, n_latent: int = 3) -> MetricTable:
    """Pipelines of equal true merit (true mean 0) whose per-subject scores are correlated.

    Each pipeline responds to a few latent subject traits with its own loadings
    (``L[p] @ z[s]``), so pipelines with similar loadings move together across subjects, as
    pipelines that share steps do; plus a subject level and independent noise of SD 0.5.
    """
    loadings = rng.normal(0.0, 1.0, size=(n_pipelines, n_latent))
    traits = rng.normal(0.0, 1.0, size=(n_latent, n_subjects))
    subject_level = rng.normal(0.0, 1.0, size=n_subjects)
    values = loadings @ traits + subject_level + rng.normal(0.0, 0.5, size=(n_pipelines, n_subjects))
    names = tuple(f"p{i:02d}" for i in range(n_pipelines))
    return MetricTable("collapsed_snr", names, tuple(f"s{i:02d}" for i in range(n_subjects)), values)


def ranking_null(
    n_studies: int, *, n_pipelines: int = 32, n_subjects: int = 16, n_sign_flips: int = 2**16, seed: int = 0
) -> RankingNull:
    """Null studies ranked with the engine; the first pipeline is the reference."""
    rng = np.random.default_rng(seed)
    any_adjusted = top_unadjusted = top_covered = 0
    for study in range(n_studies):
        table = null_pipeline_table(rng, n_pipelines, n_subjects)
        ranked = rank_pipelines(table, table.pipelines[0], n_sign_flips=n_sign_flips, n_bootstraps=10, seed=study)
        compared = [entry.vs_reference for entry in ranked if entry.vs_reference is not None]
        any_adjusted += any(comparison.p_adjusted < ALPHA for comparison in compared)
        top = next(entry for entry in ranked if entry.vs_reference is not None)
        top_unadjusted += top.vs_reference.paired.paired_t_p < ALPHA
        top_covered += top.score.ci_low <= 0.0 <= top.score.ci_high
    return RankingNull(n_studies, any_adjusted / n_studies, top_unadjusted / n_studies, top_covered / n_studies)


# --- factor effects ----------------------------------------------------------------

GRID_FACTORS = {"a": ["a0", "a1"], "b": ["b0", "b1", "b2"], "c": ["c0", "c1"]}


def grid_levels() -> dict[str, dict[str, str]]:
    """The 2×3×2 grid: pipeline name → {factor → level}."""
    return {
        f"{a}-{b}-{c}": {"a": a, "b": b, "c": c}
        for a in GRID_FACTORS["a"]
        for b in GRID_FACTORS["b"]
        for c in GRID_FACTORS["c"]
    }


def random_slope_table(rng: np.random.Generator, n_subjects: int, slope_sd: float = 1.0) -> MetricTable:
    """Every factor's effect differs between subjects (SD ``slope_sd``) around a mean of zero."""
    levels = grid_levels()
    slopes = {
        factor: {level: rng.normal(0.0, slope_sd, n_subjects) for level in names[1:]}
        for factor, names in GRID_FACTORS.items()
    }
    subject_level = rng.normal(0.0, 2.0, n_subjects)
    values = np.array(
        [
            subject_level
            + sum(slopes[factor][level] for factor, level in settings.items() if level in slopes[factor])
            + rng.normal(0.0, 0.3, n_subjects)
            for settings in levels.values()
        ]
    )
    return MetricTable("collapsed_snr", tuple(levels), tuple(f"s{i:02d}" for i in range(n_subjects)), values)


def factor_false_positives(n_studies: int, *, n_subjects: int = 12, seed: int = 0) -> dict[str, float]:
    """Per factor, the share of null studies (subject-specific effects, zero mean) with p < alpha."""
    rng = np.random.default_rng(seed)
    hits = dict.fromkeys(GRID_FACTORS, 0)
    for _ in range(n_studies):
        effects = factor_effects(random_slope_table(rng, n_subjects), grid_levels(), GRID_FACTORS)
        for factor in GRID_FACTORS:
            hits[factor] += effects.factors[factor].p < ALPHA
    return {factor: count / n_studies for factor, count in hits.items()}


def intercept_only_false_positives(n_studies: int, *, n_subjects: int = 12, seed: int = 0) -> dict[str, float]:
    """The same null studies under the replaced model: a linear mixed model with only a random
    intercept per subject, factor p from the joint Wald chi-square (statsmodels MixedLM, REML)."""
    from statsmodels.regression.mixed_linear_model import MixedLM

    rng = np.random.default_rng(seed)
    levels = grid_levels()
    columns, exog_rows = {}, []
    next_column = 1
    for factor, names in GRID_FACTORS.items():
        columns[factor] = list(range(next_column, next_column + len(names) - 1))
        next_column += len(names) - 1
    for settings in levels.values():
        row = np.zeros(next_column)
        row[0] = 1.0
        for factor, level in settings.items():
            position = GRID_FACTORS[factor].index(level)
            if position:
                row[columns[factor][position - 1]] = 1.0
        exog_rows.append(row)
    hits = dict.fromkeys(GRID_FACTORS, 0)
    for _ in range(n_studies):
        table = random_slope_table(rng, n_subjects)
        exog = np.repeat(np.array(exog_rows), n_subjects, axis=0)
        groups = np.tile(np.arange(n_subjects), len(levels))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fit = MixedLM(table.values.ravel(), exog, groups=groups).fit(reml=True)
        params = np.asarray(fit.fe_params)
        covariance = np.asarray(fit.cov_params())[: params.size, : params.size]
        for factor, index in columns.items():
            estimate = params[index]
            wald = float(estimate @ np.linalg.pinv(covariance[np.ix_(index, index)]) @ estimate)
            hits[factor] += stats.chi2.sf(wald, df=len(index)) < ALPHA
    return {factor: count / n_studies for factor, count in hits.items()}


# --- contrast-blind selection on epochs ------------------------------------------------

CONDITIONS = ("a", "b")
SFREQ = 100.0
TMIN = -0.2
N_TIMES = 120
SCORING = ScoringSpec(conditions=CONDITIONS, window_s=(0.3, 0.7), correction="holm")
BASELINE = {"step": "baseline", "window_s": [-0.2, 0.0]}
SLOW_ERP_PIPELINES = (
    PipelineSpec(name="baseline", steps=[BASELINE]),
    PipelineSpec(name="lowpass-20", steps=[{"step": "lowpass", "cutoff_hz": 20.0}, BASELINE]),
    PipelineSpec(name="highpass-1", steps=[{"step": "highpass", "cutoff_hz": 1.0}, BASELINE]),
    PipelineSpec(name="highpass-4", steps=[{"step": "highpass", "cutoff_hz": 4.0}, BASELINE]),
)


def slow_erp_epochs(
    rng: np.random.Generator,
    *,
    n_per_condition: int = 30,
    n_channels: int = 6,
    erp_uv: float = 3.0,
    difference_uv: float = 0.0,
    noise_uv: float = 10.0,
) -> EpochSet:
    """Epochs of a slow ERP under pink noise, 100 Hz, -0.2 to 1.0 s, conditions "a" and "b".

    The ERP is a Gaussian wave peaking at 0.5 s (SD 0.15 s, so nearly all its power lies
    below 2 Hz) of ``erp_uv`` at the strongest channel, falling off across channels, in
    both conditions; condition "a" adds ``difference_uv`` times the same shape. The noise
    has a 1/f power spectrum, is mixed across channels (so channels correlate), and has
    an RMS near ``noise_uv``.
    """
    times = TMIN + np.arange(N_TIMES) / SFREQ
    wave = np.exp(-0.5 * ((times - 0.5) / 0.15) ** 2)
    weights = np.linspace(1.0, 0.3, n_channels)
    n_trials = 2 * n_per_condition
    labels = np.repeat(np.array(CONDITIONS), n_per_condition)
    spectrum = rng.normal(size=(n_trials, n_channels, N_TIMES // 2 + 1)) + 1j * rng.normal(
        size=(n_trials, n_channels, N_TIMES // 2 + 1)
    )
    frequencies = np.fft.rfftfreq(N_TIMES, 1.0 / SFREQ)
    spectrum *= 1.0 / np.sqrt(np.maximum(frequencies, frequencies[1]))
    pink = np.fft.irfft(spectrum, n=N_TIMES, axis=-1)
    mixing = np.eye(n_channels) + 0.5 * rng.normal(size=(n_channels, n_channels)) / np.sqrt(n_channels)
    pink = np.einsum("ij,tjs->tis", mixing, pink)
    pink *= noise_uv / pink.std()
    signal = erp_uv * weights[None, :, None] * wave[None, None, :] * np.ones((n_trials, 1, 1))
    signal[labels == CONDITIONS[0]] += difference_uv * weights[:, None] * wave[None, :]
    return EpochSet(
        data=(signal + pink) * MICROVOLT,
        sfreq=SFREQ,
        tmin=TMIN,
        ch_names=tuple(f"E{i}" for i in range(n_channels)),
        ch_types=("eeg",) * n_channels,
        labels=labels,
    )


def score_study(
    rng: np.random.Generator, n_subjects: int, *, difference_uv: float = 0.0, erp_uv: float = 3.0
) -> list[dict]:
    """Result entries (as a run stores them) of every slow-ERP pipeline on every simulated subject."""
    entries = []
    for subject in range(n_subjects):
        epochs = slow_erp_epochs(rng, difference_uv=difference_uv, erp_uv=erp_uv)
        for pipeline in SLOW_ERP_PIPELINES:
            processed, _ = apply_pipeline(pipeline, epochs)
            entries.append(
                {
                    "pipeline": pipeline.name,
                    "subject": f"s{subject:02d}",
                    **score_epochs(processed, SCORING).model_dump(mode="json"),
                }
            )
    return entries


PIPELINE_NAMES = [pipeline.name for pipeline in SLOW_ERP_PIPELINES]


def channel_mean_differences(entries: list[dict], pipeline: str) -> np.ndarray:
    """Per subject, the condition difference averaged over channels, in µV, shape (n_subjects,)."""
    by_subject: dict[str, float] = {}
    for entry in entries:
        if entry["pipeline"] == pipeline:
            by_subject[entry["subject"]] = float(np.mean([c["mean_diff_uv"] for c in entry["channels"]]))
    return np.array(list(by_subject.values()))


@dataclass(frozen=True)
class BlindSelectionNull:
    """Over studies without a condition difference: share in which the winner's group test
    (one-sample t over subjects of the channel-mean difference, scipy.stats.ttest_1samp) has
    p < alpha, for the contrast-blind winner and for the winner by significant fraction."""

    n_studies: int
    blind_winner_rate: float
    circular_winner_rate: float
    blind_chose_highpass_4: float


def blind_selection_null(n_studies: int, *, n_subjects: int = 12, seed: int = 0) -> BlindSelectionNull:
    rng = np.random.default_rng(seed)
    blind_hits = circular_hits = chose_highpass = 0
    for _ in range(n_studies):
        entries = score_study(rng, n_subjects)
        winner = selection_document(entries, PIPELINE_NAMES, "baseline", ContrastBlindSpec()).winner
        chose_highpass += winner == "highpass-4"
        blind_hits += stats.ttest_1samp(channel_mean_differences(entries, winner), 0.0).pvalue < ALPHA
        fractions = metric_table(entries, "significant_fraction", PIPELINE_NAMES).mean_scores()
        circular = PIPELINE_NAMES[int(np.argmax(fractions))]
        circular_hits += stats.ttest_1samp(channel_mean_differences(entries, circular), 0.0).pvalue < ALPHA
    return BlindSelectionNull(n_studies, blind_hits / n_studies, circular_hits / n_studies, chose_highpass / n_studies)


# --- selection guard ------------------------------------------------------------------


@dataclass(frozen=True)
class GuardCoverage:
    """Coverage of the held-out 95 % intervals of the true means: the winner's mean, the
    reference's mean, and the winner-minus-reference difference; share of studies where
    the held-out paired test has p < alpha though every pipeline has the same true mean;
    and the mean optimism over those null studies."""

    n_studies: int
    winner: float
    reference: float
    difference: float
    null_paired_rate: float
    null_mean_optimism: float


def guard_coverage(n_studies: int, *, n_pipelines: int = 16, n_subjects: int = 24, seed: int = 0) -> GuardCoverage:
    """Half the subjects tune, half are held out; true means differ by pipeline (coverage) or not (null)."""
    rng = np.random.default_rng(seed)
    winner_in = reference_in = difference_in = null_hits = 0
    optimism = []
    for _ in range(n_studies):
        true_means = rng.normal(0.0, 0.3, n_pipelines)
        table = null_pipeline_table(rng, n_pipelines, n_subjects)
        shifted = MetricTable(table.metric, table.pipelines, table.subjects, table.values + true_means[:, None])
        tuning = table.subjects[: n_subjects // 2]
        result = tuning_holdout(shifted, table.pipelines[0], tuning)
        w, r = true_means[table.pipelines.index(result.winner)], true_means[0]
        winner_in += result.holdout.winner.ci_low <= w <= result.holdout.winner.ci_high
        reference_in += result.holdout.reference.ci_low <= r <= result.holdout.reference.ci_high
        paired = result.holdout.winner_vs_reference
        difference_in += paired is None or paired.ci_low <= w - r <= paired.ci_high
        null = tuning_holdout(table, table.pipelines[0], tuning)
        null_paired = null.holdout.winner_vs_reference
        null_hits += null_paired is not None and null_paired.paired_t_p < ALPHA
        optimism.append(null.optimism)
    return GuardCoverage(
        n_studies,
        winner_in / n_studies,
        reference_in / n_studies,
        difference_in / n_studies,
        null_hits / n_studies,
        float(np.mean(optimism)),
    )
