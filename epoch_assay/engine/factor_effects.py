"""Which settings of a grid matter: a linear mixed model of the per-subject metric on the factors.

Model: ``y[s, p] = b0 + sum over factors of b[factor, level of p] + u[s] + e[s, p]``, one
observation per subject ``s`` and pipeline ``p``, with a random intercept ``u[s]`` per
subject (each subject has its own overall level, and pipelines are compared within subjects)
and treatment coding: each factor's first level, in the order written, is its baseline, and
a level's estimate is its difference from that baseline with the other factors held fixed.
Fitted by REML with statsmodels ``MixedLM`` (Seabold & Perktold, 2010). A factor's ``p`` is
the Wald chi-square test that all its level differences are zero; level intervals are
estimate ± 1.96 standard errors (normal approximation, as statsmodels reports them).

A metric bounded in [0, 1] (the significant fraction) is analysed after the arcsine square
root transform ``y = arcsin(sqrt(x))``, which makes the variance of a binomial proportion
nearly independent of its mean (Bartlett, 1947; Anscombe, 1948) and keeps the values 0 and
1 usable, where a logit would be infinite. Estimates are then differences in radians of the
transformed scale: their sign and their test say which levels raise the metric; their size
is not a difference of fractions.
"""

import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats
from statsmodels.regression.mixed_linear_model import MixedLM

from epoch_assay.engine.document.multiverse import FactorEffectResult, FactorEffectsResult, LevelEffectResult
from epoch_assay.engine.subject_metrics import BOUNDED_METRICS, MetricTable

_NORMAL_975 = float(stats.norm.ppf(0.975))


@dataclass(frozen=True)
class LevelEffect:
    """Difference from the factor's baseline level, in the analysed scale, with its 95 % interval."""

    estimate: float
    ci_low: float
    ci_high: float

    def to_document(self) -> LevelEffectResult:
        return LevelEffectResult(estimate=self.estimate, ci_low=self.ci_low, ci_high=self.ci_high)


@dataclass(frozen=True)
class FactorEffect:
    """Wald test of the factor (NaN for a factor with one level) and one effect per level."""

    p: float
    baseline_level: str
    levels: dict[str, LevelEffect]

    def to_document(self) -> FactorEffectResult:
        return FactorEffectResult(
            p=self.p,
            baseline_level=self.baseline_level,
            levels={level: effect.to_document() for level, effect in self.levels.items()},
        )


@dataclass(frozen=True)
class FactorEffects:
    """The fitted model: ``scale`` is "arcsine_sqrt" or "identity"; ``warnings`` come from the fit."""

    metric: str
    scale: str
    n_observations: int
    n_subjects: int
    factors: dict[str, FactorEffect]
    warnings: tuple[str, ...]

    def to_document(self) -> FactorEffectsResult:
        return FactorEffectsResult(
            metric=self.metric,
            scale=self.scale,
            n_observations=self.n_observations,
            n_subjects=self.n_subjects,
            factors={name: f.to_document() for name, f in self.factors.items()},
            warnings=list(self.warnings),
        )


@dataclass(frozen=True)
class Design:
    """The model's inputs: response (n_obs,), fixed-effects matrix (n_obs, n_columns), subject of each row,
    and for each factor the columns of its non-baseline levels."""

    response: np.ndarray
    exog: np.ndarray
    groups: np.ndarray
    columns: dict[str, dict[str, int]]


def analysed_scale(metric: str) -> str:
    return "arcsine_sqrt" if metric in BOUNDED_METRICS else "identity"


def build_design(
    table: MetricTable, pipeline_levels: Mapping[str, Mapping[str, str]], factor_levels: Mapping[str, Sequence[str]]
) -> Design:
    """Long format of ``table`` with treatment-coded factors; missing values are left out.

    pipeline_levels : pipeline name → {factor → level}
    factor_levels : factor → its levels, the first being the baseline
    """
    columns: dict[str, dict[str, int]] = {}
    next_column = 1
    for factor, levels in factor_levels.items():
        columns[factor] = {level: next_column + i for i, level in enumerate(levels[1:])}
        next_column += len(levels) - 1
    indicator_rows = np.zeros((len(table.pipelines), next_column))
    indicator_rows[:, 0] = 1.0
    for row, pipeline in enumerate(table.pipelines):
        for factor, level in pipeline_levels[pipeline].items():
            if level in columns[factor]:
                indicator_rows[row, columns[factor][level]] = 1.0
    observed = np.isfinite(table.values)
    pipeline_index, subject_index = np.nonzero(observed)
    response = table.values[observed]
    if analysed_scale(table.metric) == "arcsine_sqrt":
        response = np.arcsin(np.sqrt(np.clip(response, 0.0, 1.0)))
    return Design(response=response, exog=indicator_rows[pipeline_index], groups=subject_index, columns=columns)


def factor_effects(
    table: MetricTable, pipeline_levels: Mapping[str, Mapping[str, str]], factor_levels: Mapping[str, Sequence[str]]
) -> FactorEffects:
    """Fit the mixed model and report each factor's test and level effects.

    Raises ``ValueError`` when the data cannot identify the model (fewer than two subjects,
    or no variation), with the reason.
    """
    design = build_design(table, pipeline_levels, factor_levels)
    n_subjects = int(np.unique(design.groups).size)
    if n_subjects < 2:
        raise ValueError("factor effects need scored values from at least two subjects")
    if np.ptp(design.response) == 0.0:
        raise ValueError(f"{table.metric} is the same for every pipeline and subject; there is nothing to explain")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fit = MixedLM(design.response, design.exog, groups=design.groups).fit(reml=True)
    params = np.asarray(fit.fe_params)
    covariance = np.asarray(fit.cov_params())[: params.size, : params.size]
    standard_errors = np.sqrt(np.diag(covariance))
    factors = {
        factor: FactorEffect(
            p=_wald_p(params, covariance, list(level_columns.values())),
            baseline_level=levels[0],
            levels={
                levels[0]: LevelEffect(0.0, 0.0, 0.0),
                **{
                    level: LevelEffect(
                        estimate=float(params[column]),
                        ci_low=float(params[column] - _NORMAL_975 * standard_errors[column]),
                        ci_high=float(params[column] + _NORMAL_975 * standard_errors[column]),
                    )
                    for level, column in level_columns.items()
                },
            },
        )
        for (factor, level_columns), levels in zip(design.columns.items(), factor_levels.values(), strict=False)
    }
    return FactorEffects(
        metric=table.metric,
        scale=analysed_scale(table.metric),
        n_observations=int(design.response.size),
        n_subjects=n_subjects,
        factors=factors,
        warnings=tuple(dict.fromkeys(str(item.message) for item in caught)),
    )


def _wald_p(params: np.ndarray, covariance: np.ndarray, columns: list[int]) -> float:
    """p of the chi-square Wald test that ``params[columns]`` are all zero; NaN without columns."""
    if not columns:
        return float("nan")
    estimate = params[columns]
    statistic = float(estimate @ np.linalg.pinv(covariance[np.ix_(columns, columns)]) @ estimate)
    return float(stats.chi2.sf(statistic, df=len(columns)))
