"""The result document through real processes: what /openapi.json publishes is what a run writes, and a
document stored under schema_version 1 is served converted.

Schema checks use the jsonschema package (Berman et al., an implementation of JSON Schema 2020-12, the
dialect of OpenAPI 3.1), not the project's own models.
"""

import copy
import json
from collections.abc import Iterator
from typing import Any

import httpx
import pytest
from jsonschema import Draft202012Validator
from jsonschema.exceptions import best_match
from sqlalchemy import create_engine, text

from epoch_assay.engine.document import RESULT_SCHEMA_VERSION, upgrade_document
from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService
from tests.support.result_documents import stored_v1_document

RESULT_PATH = "/v1/runs/{run_id}/result"
GRID = {
    "factors": {
        "highpass": {"none": [], "1": [{"step": "highpass", "cutoff_hz": 1.0}]},
        "rejection": {"none": [], "strict": [{"step": "trial_rejection", "criteria": {"peak_to_peak_uv": 20.0}}]},
    }
}
FULL_SCORING = SCORING | {
    "bootstrap": {"mode": "equalized", "resamples": 20, "seed": 3},
    "time_course": {"bin_s": 0.1},
}


@pytest.fixture(scope="module")
def real_result(service: LiveService) -> dict[str, Any]:
    """The JSON result of a grid run with a bootstrap, a time course and a selection, on three subjects."""
    with service.client() as client:
        study = "result-document"
        assert client.post("/v1/studies", json={"code": study, "title": "result document"}).status_code == 201
        ids = [
            upload(client, study, npz_bytes(small_epochs(seed=40 + i)), subject=f"sub-{i + 1:02d}").json()["id"]
            for i in range(3)
        ]
        selection = {"rule": "tuning_holdout", "tuning_subjects": ["sub-01", "sub-02"]}
        body = {"study": study, "epoch_sets": ids, "grid": GRID, "scoring": FULL_SCORING, "selection": selection}
        return run_and_wait(client, body)


def published_result_schema(client: httpx.Client) -> dict[str, Any]:
    """The schema of the JSON result, with the components it refers to, as /openapi.json publishes it."""
    openapi = client.get("/openapi.json").json()
    schema = openapi["paths"][RESULT_PATH]["get"]["responses"]["200"]["content"]["application/json"]["schema"]
    return {**schema, "components": openapi["components"]}


def closed(schema: Any) -> Any:
    """``schema`` with every object that lists its properties closed to other keys (additionalProperties
    false), so that validation fails on any key the schema does not list, at any depth."""
    if isinstance(schema, list):
        return [closed(item) for item in schema]
    if not isinstance(schema, dict):
        return schema
    result = {key: closed(value) for key, value in schema.items()}
    if "properties" in result and "additionalProperties" not in result:
        result["additionalProperties"] = False
    return result


def objects(value: Any) -> Iterator[dict[str, Any]]:
    """Every JSON object in ``value``, at any depth."""
    if isinstance(value, dict):
        yield value
        for item in value.values():
            yield from objects(item)
    elif isinstance(value, list):
        for item in value:
            yield from objects(item)


def test_a_real_result_validates_against_the_published_schema(client, real_result):
    schema = published_result_schema(client)
    Draft202012Validator.check_schema(schema)
    errors = sorted(Draft202012Validator(closed(schema)).iter_errors(real_result), key=str)
    assert not errors, "\n".join(f"{list(error.absolute_path)}: {error.message}" for error in errors[:10])


def test_the_real_result_exercises_every_part_of_the_document(real_result):
    entries = real_result["results"]
    assert any(entry["error"] for entry in entries) and any(entry["channels"] for entry in entries)
    assert all(real_result[part] is not None for part in ("group", "cache", "ranking", "factor_effects", "selection"))
    assert real_result["results"][0]["bootstrap"] and real_result["results"][0]["time_course"]


def referenced(schema: Any) -> Iterator[str]:
    """Names of the components ``schema`` refers to directly."""
    if isinstance(schema, dict):
        if "$ref" in schema:
            yield schema["$ref"].rsplit("/", 1)[-1]
        for value in schema.values():
            yield from referenced(value)
    elif isinstance(schema, list):
        for item in schema:
            yield from referenced(item)


def test_every_object_of_the_published_document_forbids_keys_it_does_not_list(client):
    schema = published_result_schema(client)
    components = schema["components"]["schemas"]
    reachable, pending = set(), list(referenced({"$ref": schema["$ref"]}))
    while pending:
        name = pending.pop()
        if name not in reachable:
            reachable.add(name)
            pending.extend(referenced(components[name]))
    assert {"RunResultDocument", "ResultEntry", "ChannelScore", "StepProvenance", "RankingEntry"} <= reachable
    open_objects = [
        name
        for name in sorted(reachable)
        if "properties" in components[name] and components[name].get("additionalProperties") is not False
    ]
    assert not open_objects


def test_a_key_the_schema_does_not_list_fails_validation(client, real_result):
    # The check above is only as good as its power to fail: an unlisted key deep in the document must be found.
    tampered = copy.deepcopy(real_result)
    tampered["results"][0]["channels"][0]["unlisted"] = 1
    errors = list(Draft202012Validator(closed(published_result_schema(client))).iter_errors(tampered))
    found = best_match(errors)
    assert list(found.absolute_path) == ["results", 0, "channels", 0] and "'unlisted'" in found.message


def test_a_result_is_stored_under_the_current_schema_version(service, real_result):
    (row,) = service.query("SELECT document FROM run_results WHERE run_id = :run", {"run": real_result["run"]})
    assert real_result["schema_version"] == RESULT_SCHEMA_VERSION and json.loads(row.document) == real_result


def store_document(service: LiveService, run_id: str, document: dict[str, Any]) -> None:
    """Put ``document`` in place of the run's stored result, as an older worker would have written it."""
    engine = create_engine(service.database_url)
    try:
        with engine.begin() as connection:
            connection.execute(
                text("UPDATE run_results SET document = :document WHERE run_id = :run"),
                {"document": json.dumps(document), "run": run_id},
            )
    finally:
        engine.dispose()


@pytest.fixture()
def v1_run(service: LiveService, client: httpx.Client, study: str) -> tuple[str, dict[str, Any]]:
    """A real succeeded run whose stored result is the schema_version 1 fixture (with this run's id and study)."""
    ids = [upload(client, study, npz_bytes(small_epochs(seed=60))).json()["id"]]
    run_id = run_and_wait(
        client, {"study": study, "epoch_sets": ids, "pipelines": [{"name": "raw", "steps": []}], "scoring": SCORING}
    )["run"]
    stored = stored_v1_document() | {"run": run_id, "study": study}
    store_document(service, run_id, stored)
    return run_id, stored


def test_a_result_stored_under_schema_version_1_is_served_as_the_current_document(client, v1_run):
    run_id, stored = v1_run
    served = client.get(f"/v1/runs/{run_id}/result")
    assert served.status_code == 200, served.text
    assert served.json() == upgrade_document(stored).model_dump(mode="json")
    assert served.json()["schema_version"] == RESULT_SCHEMA_VERSION


def test_a_converted_schema_version_1_result_validates_against_the_published_schema(client, v1_run):
    run_id, _stored = v1_run
    served = client.get(f"/v1/runs/{run_id}/result").json()
    assert not list(Draft202012Validator(closed(published_result_schema(client))).iter_errors(served))


def test_schema_version_1_keeps_its_numbers_and_gains_the_keys_it_left_out(client, v1_run):
    run_id, stored = v1_run
    served = client.get(f"/v1/runs/{run_id}/result").json()
    failed = next(index for index, entry in enumerate(stored["results"]) if "error" in entry)
    scored = next(index for index, entry in enumerate(stored["results"]) if "error" not in entry)
    assert served["results"][failed]["channels"] is None and served["results"][scored]["error"] is None
    assert served["results"][scored]["channels"] == stored["results"][scored]["channels"]
    assert served["group"] == stored["group"] and served["ranking"] == stored["ranking"]
    record = stored["results"][failed]["provenance"][0]
    assert served["results"][failed]["provenance"][0]["params"] == {"step": record["step"], **record["params"]}


def test_a_schema_version_1_result_is_exported_as_csv_and_reported(client, v1_run):
    run_id, stored = v1_run
    table = client.get(f"/v1/runs/{run_id}/result", params={"format": "csv"})
    assert table.status_code == 200
    channels = sum(len(entry.get("channels") or [None]) for entry in stored["results"])
    assert len(table.text.strip().splitlines()) == 1 + channels
    report = client.get(f"/v1/runs/{run_id}/report")
    assert report.status_code == 200 and "Run report" in report.text
