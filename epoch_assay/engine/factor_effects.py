"""Which settings of a grid matter: per-subject factor contrasts tested across subjects.

Two stages (the summary-statistic approach of Holmes & Friston, 1998). First, within each
subject, the metric is averaged over the pipelines at each level of a factor (so over every
setting of the other factors), and each level is compared with the factor's first level, in
the order written: ``c[s, level] = mean_s(level) - mean_s(baseline)``, in the metric's own unit.
Second, these contrasts are tested across subjects: a level's estimate is the mean of
``c[s, level]`` over subjects with its Student t 95 % interval and one-sample t p; a factor's
``p`` is the one-sample t test for a factor with two levels, and Hotelling's T² test that the
mean contrast vector is zero for more levels (Hotelling, 1931; F form as in Mardia, Kent &
Bibby, 1979, §5.2).

Because each subject contributes one contrast per level, the test's error term is the
between-subject variation of the factor's effect itself. A model with only a random
intercept per subject instead treats the pipelines of a subject as independent replicates
and understates that variation when the effect differs between subjects, which inflates
false positives (Barr et al., 2013).

Missing values: a subject's level mean is over the pipelines it has a value for; a subject
without any value at a level has no contrast for it. The omnibus test uses the subjects with
every contrast of the factor.
"""

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

from epoch_assay.engine.document.multiverse import FactorEffectResult, FactorEffectsResult, LevelEffectResult
from epoch_assay.engine.subject_metrics import MetricTable

CONFIDENCE = 0.95


@dataclass(frozen=True)
class LevelEffect:
    """Mean over subjects of the level's contrast with the baseline level, in the metric's unit.

    ci_low, ci_high : Student t 95 % interval over subjects
    t, p : one-sample t of the contrasts against zero and its two-sided p
    n_subjects : subjects with a contrast for this level
    """

    estimate: float
    ci_low: float
    ci_high: float
    t: float
    p: float
    n_subjects: int

    def to_document(self) -> LevelEffectResult:
        return LevelEffectResult(
            estimate=self.estimate,
            ci_low=self.ci_low,
            ci_high=self.ci_high,
            t=self.t,
            p=self.p,
            n_subjects=self.n_subjects,
        )


@dataclass(frozen=True)
class FactorEffect:
    """The factor's test across subjects (NaN for one level or too few subjects) and one effect per level.

    test : "one-sample t" for two levels, "Hotelling T²" for more, "none" for one level
    statistic : t, or Hotelling's F; df : its degrees of freedom
    n_subjects : subjects in the factor's test
    """

    p: float
    test: str
    statistic: float
    df: tuple[float, ...]
    n_subjects: int
    baseline_level: str
    levels: dict[str, LevelEffect]

    def to_document(self) -> FactorEffectResult:
        return FactorEffectResult(
            p=self.p,
            test=self.test,
            statistic=self.statistic,
            df=list(self.df),
            n_subjects=self.n_subjects,
            baseline_level=self.baseline_level,
            levels={level: effect.to_document() for level, effect in self.levels.items()},
        )


@dataclass(frozen=True)
class FactorEffects:
    """Every factor of the grid; estimates are in the metric's own unit (``scale`` "identity")."""

    metric: str
    scale: str
    method: str
    n_observations: int
    n_subjects: int
    factors: dict[str, FactorEffect]
    warnings: tuple[str, ...]

    def to_document(self) -> FactorEffectsResult:
        return FactorEffectsResult(
            metric=self.metric,
            scale=self.scale,
            method=self.method,
            n_observations=self.n_observations,
            n_subjects=self.n_subjects,
            factors={name: f.to_document() for name, f in self.factors.items()},
            warnings=list(self.warnings),
        )


METHOD = (
    "per-subject contrasts of each level with the factor's first level, averaged over the other factors, "
    "tested across subjects (one-sample t; Hotelling T² for a factor of more than two levels)"
)


def subject_contrasts(
    table: MetricTable, pipeline_levels: Mapping[str, Mapping[str, str]], factor: str, levels: Sequence[str]
) -> np.ndarray:
    """Per subject, each non-baseline level's mean minus the baseline level's mean.

    Returns array, shape (n_subjects, len(levels) - 1), in the metric's unit; NaN where a
    subject has no value at the level or at the baseline.
    """
    level_means = []
    for level in levels:
        rows = [i for i, name in enumerate(table.pipelines) if pipeline_levels[name].get(factor) == level]
        values = table.values[rows]
        present = np.isfinite(values)
        count = present.sum(axis=0)
        total = np.where(present, values, 0.0).sum(axis=0)
        level_means.append(np.where(count > 0, total / np.maximum(count, 1), np.nan))
    means = np.array(level_means).T
    return means[:, 1:] - means[:, :1]


def level_effect(contrasts: np.ndarray, confidence: float = CONFIDENCE) -> LevelEffect:
    """One-sample t over subjects of one level's contrasts, shape (n_subjects,), NaN left out."""
    values = contrasts[np.isfinite(contrasts)]
    n = values.size
    nan = float("nan")
    if n < 2:
        return LevelEffect(float(values.mean()) if n else nan, nan, nan, nan, nan, n)
    mean = float(values.mean())
    se = float(values.std(ddof=1) / np.sqrt(n))
    half = float(stats.t.ppf(0.5 + confidence / 2, n - 1) * se)
    if se == 0.0:
        return LevelEffect(mean, mean, mean, nan, nan, n)
    t = mean / se
    return LevelEffect(mean, mean - half, mean + half, t, float(2 * stats.t.sf(abs(t), n - 1)), n)


@dataclass(frozen=True)
class HotellingResult:
    """One-sample Hotelling T² test that a mean vector is zero, in its exact F form."""

    t2: float
    f: float
    df: tuple[float, float]
    p: float
    n_subjects: int


def hotelling_one_sample(contrasts: np.ndarray) -> HotellingResult:
    """Test that the mean of the rows of ``contrasts`` is zero; rows with a NaN are left out.

    contrasts : array, shape (n_subjects, k); needs n_subjects > k and a non-singular covariance
    T² = n x̄ᵀ S⁻¹ x̄ and F = (n - k) / (k (n - 1)) T² ~ F(k, n - k) under normal rows.
    """
    rows = contrasts[np.all(np.isfinite(contrasts), axis=1)]
    n, k = rows.shape
    if n <= k:
        return HotellingResult(float("nan"), float("nan"), (float(k), float(n - k)), float("nan"), n)
    mean = rows.mean(axis=0)
    covariance = np.atleast_2d(np.cov(rows, rowvar=False, ddof=1))
    if np.linalg.matrix_rank(covariance) < k:
        return HotellingResult(float("nan"), float("nan"), (float(k), float(n - k)), float("nan"), n)
    t2 = float(n * mean @ np.linalg.solve(covariance, mean))
    f = (n - k) / (k * (n - 1)) * t2
    return HotellingResult(t2, f, (float(k), float(n - k)), float(stats.f.sf(f, k, n - k)), n)


def factor_effects(
    table: MetricTable, pipeline_levels: Mapping[str, Mapping[str, str]], factor_levels: Mapping[str, Sequence[str]]
) -> FactorEffects:
    """Each factor's test across subjects and its level effects.

    pipeline_levels : pipeline name → {factor → level}
    factor_levels : factor → its levels, the first being the baseline

    Raises ``ValueError`` when the data cannot be analysed (fewer than two subjects with a
    value, or no variation), with the reason.
    """
    observed = np.isfinite(table.values)
    n_subjects = int(np.count_nonzero(observed.any(axis=0)))
    if n_subjects < 2:
        raise ValueError("factor effects need scored values from at least two subjects")
    if np.ptp(table.values[observed]) == 0.0:
        raise ValueError(f"{table.metric} is the same for every pipeline and subject; there is nothing to explain")
    factors: dict[str, FactorEffect] = {}
    notes: list[str] = []
    for factor, levels in factor_levels.items():
        contrasts = subject_contrasts(table, pipeline_levels, factor, levels)
        effects = {level: level_effect(contrasts[:, i]) for i, level in enumerate(levels[1:])}
        factors[factor] = _factor_test(factor, levels, contrasts, effects, notes)
    return FactorEffects(
        metric=table.metric,
        scale="identity",
        method=METHOD,
        n_observations=int(np.count_nonzero(observed)),
        n_subjects=n_subjects,
        factors=factors,
        warnings=tuple(notes),
    )


def _factor_test(
    factor: str, levels: Sequence[str], contrasts: np.ndarray, effects: dict[str, LevelEffect], notes: list[str]
) -> FactorEffect:
    nan = float("nan")
    baseline = {levels[0]: LevelEffect(0.0, 0.0, 0.0, nan, nan, int(np.isfinite(contrasts).any(axis=1).sum()))}
    if len(levels) < 2:
        return FactorEffect(nan, "none", nan, (), 0, levels[0], baseline)
    if len(levels) == 2:
        only = effects[levels[1]]
        df = (float(only.n_subjects - 1),)
        return FactorEffect(only.p, "one-sample t", only.t, df, only.n_subjects, levels[0], {**baseline, **effects})
    result = hotelling_one_sample(contrasts)
    if not np.isfinite(result.p):
        notes.append(
            f"{factor}: Hotelling's T² needs more subjects with every level ({result.n_subjects}) than "
            f"non-baseline levels ({len(levels) - 1}) and contrasts that vary independently; no omnibus p"
        )
    return FactorEffect(
        result.p, "Hotelling T²", result.f, result.df, result.n_subjects, levels[0], {**baseline, **effects}
    )
