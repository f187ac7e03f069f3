"""Re-referencing of EEG channels: to their average, to chosen channels, to infinity (REST), or not at all."""

from typing import Any, ClassVar, Literal

import numpy as np
from pydantic import Field, model_validator

from epoch_assay.engine.epochs import EpochSet, EpochSetMeta
from epoch_assay.engine.errors import SpecError
from epoch_assay.engine.montage import eeg_channels_without_position, epoch_set_positions, missing_positions_error
from epoch_assay.engine.provenance import StepProvenanceBase
from epoch_assay.engine.steps.base import Step
from epoch_assay.engine.steps.channel_data import subtract_on_channels
from epoch_assay.engine.steps.rest import rest_reference_weights

REFERENCED_CHANNEL_TYPES = ("eeg",)

# Kinds whose reference is built from channels named in the spec; every other kind
# must leave ``channels`` empty.
_KINDS_WITH_CHANNELS = frozenset({"channels"})


# A sphere through the electrodes is fitted to their positions: four points at the least.
MIN_REST_CHANNELS = 4


class Reference(Step):
    """Subtract a reference signal from every EEG channel, bad ones included.

    ``average``: the reference is the mean of the EEG channels not marked bad. Bad
    channels are left out of the mean but re-referenced like the others (common
    practice), so that a bad channel interpolated later matches its neighbours.

    ``channels``: the reference is the mean of the listed EEG channels (one channel,
    or several such as linked mastoids). The reference channels stay in the set; a
    single reference channel becomes zero.

    ``rest``: the reference is the weighted mean of the good EEG channels that the
    reference electrode standardization technique (Yao, 2001) gives for a spherical
    head fitted to their positions (see :mod:`epoch_assay.engine.steps.rest`); positions come
    from the file or, by channel name, from MNE's standard 10-20 montage.

    ``none``: the data are left as recorded (their reference is already the one wanted);
    the step is recorded so the choice shows in the provenance.
    """

    step: Literal["reference"] = "reference"
    examples: ClassVar[tuple[dict[str, Any], ...]] = (
        {"kind": "average"},
        {"kind": "channels", "channels": ["TP9", "TP10"]},
        {"kind": "rest"},
        {"kind": "none"},
    )

    kind: Literal["average", "channels", "rest", "none"] = Field(description="What the channels are referenced to.")
    channels: tuple[str, ...] = Field((), description="Reference channel names (kind 'channels' only).")

    @model_validator(mode="after")
    def _channels_match_kind(self) -> "Reference":
        if self.kind in _KINDS_WITH_CHANNELS:
            if not self.channels:
                raise ValueError(f"kind {self.kind!r} needs at least one channel name in 'channels'")
            repeated = sorted({name for name in self.channels if self.channels.count(name) > 1})
            if repeated:
                raise ValueError(f"'channels' lists {', '.join(repeated)} more than once; list each channel once")
        elif self.channels:
            raise ValueError(f"kind {self.kind!r} takes no 'channels'; remove them or use kind 'channels'")
        return self

    def check(self, meta: EpochSetMeta) -> EpochSetMeta:
        eeg_names = [
            name for name, kind in zip(meta.ch_names, meta.ch_types, strict=False) if kind in REFERENCED_CHANNEL_TYPES
        ]
        if not eeg_names:
            raise SpecError(("kind",), "this epoch set has no EEG channel to re-reference; remove the reference step")
        types_by_name = dict(zip(meta.ch_names, meta.ch_types, strict=False))
        for index, name in enumerate(self.channels):
            if name not in types_by_name:
                raise SpecError(
                    ("channels", index),
                    f"channel {name!r} is not in this epoch set; available: {', '.join(eeg_names)}",
                )
            if types_by_name[name] not in REFERENCED_CHANNEL_TYPES:
                raise SpecError(
                    ("channels", index),
                    f"channel {name!r} is of type {types_by_name[name]!r}, not EEG; choose EEG channels "
                    f"from: {', '.join(eeg_names)}",
                )
        if self.kind == "rest":
            unplaced = eeg_channels_without_position(meta)
            if unplaced:
                raise missing_positions_error(("kind",), "the REST reference", unplaced, "kind 'average'")
            _check_enough_for_rest(len([name for name in eeg_names if name not in meta.bads]))
        return meta

    def apply(self, epochs: EpochSet) -> tuple[EpochSet, StepProvenanceBase]:
        if self.kind == "none":
            return epochs, self.record()
        missing = [name for name in self.channels if name not in epochs.ch_names]
        if missing:
            raise SpecError(
                ("channels",),
                f"reference channel(s) {', '.join(missing)} are no longer in the epoch set (an earlier step "
                "dropped them); interpolate bad channels instead of dropping them, or reference first",
            )
        targets = epochs.picks(REFERENCED_CHANNEL_TYPES, exclude_bads=False)
        sources = self._reference_channels(epochs)
        weights = self._reference_weights(epochs, sources)
        reference = np.einsum("c,tcn->tn", weights, epochs.data[:, sources])[:, None, :]
        data = subtract_on_channels(epochs.data, targets, reference)
        bad_sources = [name for name in self.channels if name in epochs.bads]
        warnings = (
            [f"reference channel(s) {', '.join(bad_sources)} are marked bad and were used nonetheless"]
            if bad_sources
            else []
        )
        return epochs.with_changes(data=data), self.record(warnings=warnings)

    def _reference_channels(self, epochs: EpochSet) -> np.ndarray:
        """Indices of the channels whose mean is the reference."""
        if self.kind == "channels":
            return epochs.channel_indices(self.channels)
        good_eeg = epochs.picks(REFERENCED_CHANNEL_TYPES, exclude_bads=True)
        if not good_eeg.size:
            raise SpecError(
                ("kind",),
                "every EEG channel is marked bad, so there is no channel left to average; "
                "use kind 'channels' or mark fewer channels bad",
            )
        return good_eeg

    def _reference_weights(self, epochs: EpochSet, sources: np.ndarray) -> np.ndarray:
        """Weight of each reference channel, shape (n_sources,); the reference is their weighted sum."""
        if self.kind != "rest":
            return np.full(sources.size, 1.0 / sources.size)
        positions = epoch_set_positions(epochs)[sources]
        unplaced = [
            epochs.ch_names[i]
            for i, known in zip(sources, np.isfinite(positions).all(axis=1), strict=False)
            if not known
        ]
        if unplaced:
            raise missing_positions_error(("kind",), "the REST reference", unplaced, "kind 'average'")
        _check_enough_for_rest(sources.size)
        return rest_reference_weights(positions)


def _check_enough_for_rest(n_good_eeg: int) -> None:
    """Refuse REST on fewer good EEG channels than the sphere fit to their positions needs."""
    if n_good_eeg < MIN_REST_CHANNELS:
        raise SpecError(
            ("kind",),
            f"the REST reference fits a sphere to the positions of the good EEG channels and needs at least "
            f"{MIN_REST_CHANNELS} of them; {n_good_eeg} are left; use kind 'average' or keep more channels",
        )
