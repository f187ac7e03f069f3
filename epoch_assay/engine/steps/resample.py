"""Anti-aliased change of the sampling rate by polyphase filtering."""

import math
from dataclasses import replace
from fractions import Fraction
from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field
from scipy import signal

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.provenance import Stage, StepProvenanceBase
from epoch_assay.engine.steps.base import Step

# The up / down factors of the rate ratio are kept small enough for scipy's polyphase filter
# (its length grows with them); a ratio that needs larger ones is refused.
MAX_RATIO_TERM = 1000


def rate_ratio(sfreq_in: float, sfreq_out: float) -> Fraction:
    """``sfreq_out / sfreq_in`` as a fraction with terms of at most ``MAX_RATIO_TERM``."""
    return Fraction(sfreq_out / sfreq_in).limit_denominator(MAX_RATIO_TERM)


def resampled_length(n_times: int, ratio: Fraction) -> int:
    """Number of samples ``scipy.signal.resample_poly`` returns for ``n_times`` input samples."""
    return math.ceil(n_times * ratio.numerator / ratio.denominator)


class Resample(Step):
    """Resample every channel to ``sfreq`` with ``scipy.signal.resample_poly``.

    The anti-aliasing low-pass is scipy's Kaiser-windowed sinc (beta 5) with its cutoff at
    the lower of the two Nyquist frequencies; each epoch's edges are extended by its own
    straight-line trend (``padtype="line"``) so they do not ring against zeros. The first
    sample keeps its time, so ``tmin`` is unchanged. Only downsampling is offered:
    upsampling adds no information and only multiplies the work of every later step.
    """

    step: Literal["resample"] = "resample"
    stage: ClassVar[Stage] = Stage.CONTINUOUS
    examples: ClassVar[tuple[dict[str, Any], ...]] = ({"sfreq": 125.0}, {"sfreq": 100.0}, {"sfreq": 250.0})

    sfreq: float = Field(gt=0.0, allow_inf_nan=False, description="New sampling frequency, in Hz.")

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        if self.sfreq > meta.sfreq:
            raise SpecError(
                ("sfreq",),
                f"{self.sfreq:g} Hz is above the epoch set's sampling rate of {meta.sfreq:g} Hz; upsampling adds "
                f"no information, so choose a rate of at most {meta.sfreq:g} Hz or remove the step",
            )
        ratio = rate_ratio(meta.sfreq, self.sfreq)
        if abs(float(ratio) * meta.sfreq - self.sfreq) > 1e-9 * self.sfreq:
            raise SpecError(
                ("sfreq",),
                f"{self.sfreq:g} Hz is not a simple fraction of {meta.sfreq:g} Hz (the nearest with terms up to "
                f"{MAX_RATIO_TERM} gives {float(ratio) * meta.sfreq:.6g} Hz); choose e.g. {meta.sfreq / 2:g} or "
                f"{meta.sfreq / 4:g} Hz",
            )
        n_times = resampled_length(meta.n_times, ratio)
        if n_times < 2:
            raise SpecError(
                ("sfreq",),
                f"at {self.sfreq:g} Hz an epoch of {meta.n_times} samples would keep {n_times}; choose a higher rate",
            )
        return replace(meta, sfreq=self.sfreq, n_times=n_times)

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        if self.sfreq == epochs.sfreq:
            return epochs, self.record()
        ratio = rate_ratio(epochs.sfreq, self.sfreq)
        data = signal.resample_poly(
            np.asarray(epochs.data, dtype=np.float64), ratio.numerator, ratio.denominator, axis=-1, padtype="line"
        )
        return epochs.with_changes(data=data, sfreq=self.sfreq), self.record()
