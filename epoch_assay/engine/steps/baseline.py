"""Baseline correction: remove each trial's mean over a time window."""

from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, model_validator

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.provenance import StepProvenanceBase
from epoch_assay.engine.steps.base import Step
from epoch_assay.engine.steps.channel_data import channel_rows, subtract_on_channels
from epoch_assay.engine.windows import check_window_in_epoch, window_mask

BASELINED_CHANNEL_TYPES = ("eeg", "eog")


class Baseline(Step):
    """Subtract, per trial and channel, the mean over the samples in ``window_s``.

    Applies to EEG and EOG channels, bad ones included; misc and stim channels are
    left unchanged.
    """

    step: Literal["baseline"] = "baseline"
    examples: ClassVar[tuple[dict[str, Any], ...]] = ({"window_s": [-0.2, 0.0]},)

    window_s: tuple[float, float] = Field(description="Baseline window [a, b] in s, both ends included.")

    @model_validator(mode="after")
    def _ordered_window(self) -> "Baseline":
        if not self.window_s[0] < self.window_s[1]:
            raise ValueError("window_s must be [start, end] with start < end, in s")
        return self

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        check_window_in_epoch(self.window_s, meta, ("window_s",))
        return meta

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        picks = epochs.picks(BASELINED_CHANNEL_TYPES, exclude_bads=False)
        in_window = np.flatnonzero(window_mask(epochs.times, self.window_s))
        window = slice(in_window[0], in_window[-1] + 1)
        means = channel_rows(epochs.data, picks)[:, :, window].mean(axis=-1, keepdims=True)
        return epochs.with_changes(data=subtract_on_channels(epochs.data, picks, means)), self.record()
