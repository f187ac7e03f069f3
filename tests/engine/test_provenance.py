"""Typed step records: one model per step in one union, and records stored before typing read back."""

import pickle

import pytest
from pydantic import TypeAdapter, ValidationError

from epoch_assay.engine.provenance import NOT_INSTALLED, Stage, installed_version, upgrade_legacy_record
from epoch_assay.engine.steps import StepProvenance
from epoch_assay.engine.steps.bad_channels import BadChannels
from epoch_assay.engine.steps.filters import HighPass

RECORDS = TypeAdapter(StepProvenance)
# Records as the worker stored them before records were typed per step (result schema version 1).
LEGACY_HIGHPASS = {
    "step": "highpass",
    "params": {"method": "fir", "order": 4, "cutoff_hz": 1.0},
    "channels_flagged": {},
    "channels_dropped": [],
    "channels_interpolated": [],
    "trials_removed": {},
    "components_removed": [],
    "warnings": [],
    "seconds": 0.25,
    "stage": "continuous",
}
LEGACY_BAD_CHANNELS = {
    **LEGACY_HIGHPASS,
    "step": "bad_channels",
    "params": {"criteria": {"flat": {"min_std_uv": 0.5}}, "action": "drop"},
    "channels_flagged": {"O2": ["flat"]},
    "channels_dropped": ["O2"],
}


def test_a_record_has_only_its_own_steps_fields():
    assert "trials_removed" not in HighPass.provenance_model.model_fields
    assert {"channels_flagged", "channels_dropped"} <= set(BadChannels.provenance_model.model_fields)


def test_a_record_with_another_steps_field_is_refused():
    record = HighPass(cutoff_hz=1.0).record().to_json()
    with pytest.raises(ValidationError):
        RECORDS.validate_python({**record, "trials_removed": {"a": 1}})


@pytest.mark.parametrize("legacy", [LEGACY_HIGHPASS, LEGACY_BAD_CHANNELS], ids=["highpass", "bad_channels"])
def test_a_record_stored_before_typing_reads_back_as_the_steps_record(legacy):
    record = RECORDS.validate_python(upgrade_legacy_record(legacy))
    assert (record.step, record.version, record.stage, record.seconds) == (
        legacy["step"],
        1,
        Stage.CONTINUOUS,
        0.25,
    )


def test_legacy_outputs_are_kept_under_todays_criterion_names():
    record = RECORDS.validate_python(upgrade_legacy_record(LEGACY_BAD_CHANNELS))
    assert (record.channels_flagged, record.channels_dropped) == ({"O2": ["near_silent"]}, ["O2"])
    assert record.params.criteria.near_silent is not None
    assert record.params.criteria.near_silent.std_below_uv == 0.5 and record.version == 1


def test_the_version_of_a_missing_distribution_says_so():
    assert installed_version("no-such-distribution-of-epoch-assay") == NOT_INSTALLED


def test_a_record_survives_pickling_between_processes():
    step = BadChannels.model_validate({"criteria": {"near_silent": {}}, "action": "drop"})
    record = step.record(channels_flagged={"O2": ["near_silent"]}, channels_dropped=["O2"])
    assert pickle.loads(pickle.dumps(record)) == record
