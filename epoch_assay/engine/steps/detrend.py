"""Per-epoch removal of the mean or of a least-squares straight line."""

from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field
from scipy import signal

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.provenance import StepProvenanceBase
from epoch_assay.engine.steps.base import Step

DETRENDED_CHANNEL_TYPES = ("eeg", "eog")


class Detrend(Step):
    """Subtract, per trial and channel, the mean (``constant``) or the least-squares line (``linear``).

    Uses ``scipy.signal.detrend`` over the whole epoch; EEG and EOG channels, bad ones included.
    """

    step: Literal["detrend"] = "detrend"
    examples: ClassVar[tuple[dict[str, Any], ...]] = ({"kind": "linear"}, {"kind": "constant"})

    kind: Literal["constant", "linear"] = Field("linear", description="Remove the mean or a straight line.")

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        picks = epochs.picks(DETRENDED_CHANNEL_TYPES, exclude_bads=False)
        data = epochs.data.astype(np.float64, copy=True)
        if picks.size:
            data[:, picks] = signal.detrend(data[:, picks], axis=-1, type=self.kind)
        return epochs.with_changes(data=data), self.record()
