"""The step contract, checked for every registered step on each of its examples.

``check(meta)`` predicts the metadata of what ``apply`` returns (exactly, or as a bound for
the parts a step declares data-dependent), ``apply`` leaves its input unchanged, and the
record is the step's own typed record and survives JSON. A step added to the registry is
covered by adding it there: its examples are run here.
"""

import json
import math
from dataclasses import replace
from typing import Literal

import numpy as np
import pytest
from pydantic import TypeAdapter

from epoch_assay.engine.epochs import EpochSet
from epoch_assay.engine.provenance import Stage
from epoch_assay.engine.steps import STEP_CLASSES, StepProvenance
from epoch_assay.engine.steps.bad_channels import BadChannels
from epoch_assay.engine.steps.base import Step, step_name
from epoch_assay.engine.steps.detrend import Detrend
from epoch_assay.engine.steps.trial_rejection import TrialRejection
from tests.support.step_cases import FLAT, NOISY, STEP_CASES, Applied, applied_case, contract_epochs, run_step

CASES = [pytest.param(index, id=case.id) for index, case in enumerate(STEP_CASES)]
RECORDS = TypeAdapter(StepProvenance)


def metadata_violations(step: Step, applied: Applied) -> list[str]:
    """Where the output's metadata differs from what ``check`` predicted, in words; empty if nowhere."""
    predicted, actual = applied.predicted, applied.output.meta()
    loose = step.data_dependent()
    problems = [
        f"{name}: check says {getattr(predicted, name)!r}, apply gives {getattr(actual, name)!r}"
        for name in ("sfreq", "tmin")
        if not math.isclose(getattr(predicted, name), getattr(actual, name), rel_tol=1e-12, abs_tol=1e-12)
    ]
    if predicted.n_times != actual.n_times:
        problems.append(f"n_times: check says {predicted.n_times}, apply gives {actual.n_times}")
    predicted_types = dict(zip(predicted.ch_names, predicted.ch_types, strict=True))
    if "ch_names" in loose:
        remaining = iter(predicted.ch_names)
        if not all(name in remaining for name in actual.ch_names):
            problems.append(f"ch_names: {actual.ch_names} is not a subsequence of {predicted.ch_names}")
        if any(predicted_types.get(name) != kind for name, kind in zip(actual.ch_names, actual.ch_types, strict=True)):
            problems.append("ch_types: a kept channel changed its type")
    else:
        if (actual.ch_names, actual.ch_types) != (predicted.ch_names, predicted.ch_types):
            problems.append(f"channels: check says {predicted.ch_names}, apply gives {actual.ch_names}")
        if actual.has_positions != predicted.has_positions:
            problems.append(f"has_positions: check says {predicted.has_positions}, apply gives {actual.has_positions}")
    if "bads" in loose:
        if not actual.bads <= set(actual.ch_names):
            problems.append(f"bads: {sorted(actual.bads - set(actual.ch_names))} are not channels of the output")
    elif actual.bads != predicted.bads:
        problems.append(f"bads: check says {sorted(predicted.bads)}, apply gives {sorted(actual.bads)}")
    if "condition_counts" in loose:
        if any(count > predicted.condition_counts.get(label, 0) for label, count in actual.condition_counts.items()):
            problems.append(f"trials: {actual.condition_counts} exceeds the bound {predicted.condition_counts}")
    elif actual.condition_counts != predicted.condition_counts:
        problems.append(f"trials: check says {predicted.condition_counts}, apply gives {actual.condition_counts}")
    return problems


def input_changes(applied: Applied) -> list[str]:
    """Which parts of the input ``apply`` changed, in words; empty if none."""
    before, after = applied.before, applied.after
    arrays = {"data": (before.data, after.data), "labels": (before.labels, after.labels)}
    if before.positions is not None or after.positions is not None:
        arrays["positions"] = (before.positions, after.positions)
    problems = [name for name, (old, new) in arrays.items() if not _same_array(old, new)]
    fields = ("sfreq", "tmin", "ch_names", "ch_types", "bads")
    problems += [name for name in fields if getattr(before, name) != getattr(after, name)]
    return problems


def _same_array(old: np.ndarray | None, new: np.ndarray | None) -> bool:
    if old is None or new is None:
        return old is new
    return old.dtype == new.dtype and np.array_equal(old, new, equal_nan=old.dtype.kind == "f")


@pytest.mark.parametrize("cls", STEP_CLASSES, ids=lambda cls: step_name(cls))
def test_every_registered_step_has_examples_and_its_own_record(cls):
    assert cls.examples, f"{cls.__name__} has no examples for the contract test"
    assert cls.provenance_model.model_fields["step"].annotation == Literal[step_name(cls)]
    assert isinstance(cls.stage, Stage) and cls.version >= 1


@pytest.mark.parametrize("index", CASES)
def test_check_predicts_the_metadata_apply_returns(index):
    applied = applied_case(index)
    assert metadata_violations(STEP_CASES[index].step(), applied) == []


@pytest.mark.parametrize("index", CASES)
def test_apply_leaves_its_input_unchanged(index):
    assert input_changes(applied_case(index)) == []


@pytest.mark.parametrize("index", CASES)
def test_record_is_the_steps_own_typed_record(index):
    step, record = STEP_CASES[index].step(), applied_case(index).record
    assert type(record) is type(step).provenance_model
    assert (record.step, record.version) == (step_name(type(step)), step.version)
    assert record.params.model_dump() == step.model_dump(exclude={"step"})


@pytest.mark.parametrize("index", CASES)
def test_record_round_trips_through_json(index):
    record = applied_case(index).record
    assert RECORDS.validate_python(json.loads(json.dumps(record.to_json()))) == record


def test_bad_channel_examples_find_the_injected_faults():
    # Guards the contract test itself: the data-dependent cases must change something.
    flagged = [applied_case(i).record for i, case in enumerate(STEP_CASES) if case.cls is BadChannels]
    assert all({FLAT, NOISY} <= set(record.channels_flagged) for record in flagged)  # type: ignore[attr-defined]


def test_trial_rejection_examples_remove_some_trials_but_not_all():
    n_trials = contract_epochs().n_trials
    kept = [applied_case(i).output.n_trials for i, case in enumerate(STEP_CASES) if case.cls is TrialRejection]
    assert all(0 < count < n_trials for count in kept)


class _ShiftedTimes(Detrend):
    """A deliberately wrong step: its check says the epoch starts 0.1 s later, its apply keeps the times."""

    def check(self, meta):
        return replace(meta, tmin=meta.tmin + 0.1)


class _SilentDrop(Detrend):
    """A deliberately wrong step: its apply drops the last channel without declaring it data-dependent."""

    def apply(self, epochs: EpochSet):
        output, record = super().apply(epochs)
        keep = slice(0, epochs.n_channels - 1)
        return output.with_changes(
            data=output.data[:, keep],
            ch_names=output.ch_names[keep],
            ch_types=output.ch_types[keep],
            positions=None if output.positions is None else output.positions[keep],
        ), record


class _InPlace(Detrend):
    """A deliberately wrong step: its apply writes into its input's array."""

    def apply(self, epochs: EpochSet):
        epochs.data[0, 0, 0] += 1.0
        return super().apply(epochs)


@pytest.mark.parametrize("wrong", [_ShiftedTimes, _SilentDrop], ids=["check-shifts-times", "apply-drops-channel"])
def test_contract_check_fails_for_a_step_whose_check_disagrees_with_apply(wrong):
    step = wrong()
    assert metadata_violations(step, run_step(step, contract_epochs())) != []


def test_contract_check_fails_for_a_step_that_changes_its_input():
    epochs = contract_epochs()
    mine = epochs.with_changes(data=epochs.data.copy())
    assert input_changes(run_step(_InPlace(), mine)) == ["data"]
