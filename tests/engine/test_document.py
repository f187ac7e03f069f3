"""The result document's models: described fields, null for undefined numbers, closed objects, conversion of v1."""

import inspect
import json
import math

import numpy as np
import pydantic
import pytest

from epoch_assay.engine.document import (
    RESULT_SCHEMA_VERSION,
    RunResultDocument,
    entry,
    multiverse,
    run,
    upgrade_document,
)
from epoch_assay.engine.document.multiverse import SubjectSpread
from epoch_assay.engine.document.values import DocumentModel
from tests.support.result_documents import stored_v1_document

MODELS = [
    cls
    for module in (entry, multiverse, run)
    for _name, cls in inspect.getmembers(module, inspect.isclass)
    if issubclass(cls, DocumentModel) and cls is not DocumentModel
]


@pytest.mark.parametrize("model", MODELS, ids=[model.__name__ for model in MODELS])
def test_every_field_is_described(model):
    assert [name for name, field in model.model_fields.items() if not field.description] == []


def test_nan_and_infinities_become_null_and_numpy_floats_plain_floats():
    # JSON (RFC 8259 §6) has no NaN or infinity; null stands for a value that is undefined.
    spread = SubjectSpread(mean=np.float64("nan"), median=np.float32(1.5), se=math.inf)
    assert spread.model_dump(mode="json") == {"mean": None, "median": 1.5, "se": None}
    assert type(spread.median) is float


def test_a_number_field_refuses_text_that_is_not_a_number():
    with pytest.raises(pydantic.ValidationError):
        SubjectSpread(mean="many", median=1.0, se=None)


def test_a_key_no_model_lists_is_refused():
    stored = upgrade_document(stored_v1_document()).model_dump(mode="json")
    stored["results"][0]["channels"][0]["unlisted"] = 1
    with pytest.raises(pydantic.ValidationError, match="unlisted"):
        RunResultDocument.model_validate(stored)


def test_a_current_document_reads_back_unchanged():
    current = upgrade_document(stored_v1_document())
    text = json.dumps(current.model_dump(mode="json"), allow_nan=False)
    assert upgrade_document(json.loads(text)) == current


def test_version_1_is_converted_to_the_current_version():
    stored = stored_v1_document()
    converted = upgrade_document(stored)
    assert stored["schema_version"] == 1 and converted.schema_version == RESULT_SCHEMA_VERSION == 2
    failed = next(index for index, item in enumerate(stored["results"]) if "error" in item)
    scored = next(index for index, item in enumerate(stored["results"]) if "error" not in item)
    assert converted.results[failed].channels is None and converted.results[scored].error is None
    record = stored["results"][failed]["provenance"][0]
    converted_record = converted.results[failed].provenance[0]
    assert converted_record.step == record["step"] and converted_record.version == 1
    assert converted_record.params.model_dump(mode="json") == record["params"]


def test_version_1_keeps_every_value_it_stored():
    stored = stored_v1_document()
    converted = upgrade_document(stored).model_dump(mode="json")
    for index, item in enumerate(stored["results"]):
        kept = {key: value for key, value in converted["results"][index].items() if key in item}
        assert kept | {"provenance": item["provenance"]} == item
    assert converted["group"] == stored["group"] and converted["ranking"] == stored["ranking"]
    for part in ("factor_effects", "selection"):  # these gain "error": null
        assert {key: converted[part][key] for key in stored[part]} == stored[part]
        assert converted[part]["error"] is None
