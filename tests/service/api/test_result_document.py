"""The result document through real processes: what /openapi.json publishes is what a run writes, a
document stored under schema_version 1 is served converted, and a client generated from /openapi.json
types every value of it.

Outside references: the jsonschema package (an implementation of JSON Schema 2020-12, the dialect of
OpenAPI 3.1) checks documents against the published schema; openapi-python-client generates the client
a LIMS integrator would, and its attrs classes parse the documents.
"""

import copy
import importlib
import json
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import attrs
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
        "highpass": {"none": [], "1": [{"step": "highpass", "cutoff_hz": 1.0, "allow_short_epochs": True}]},
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
    assert {"RunResultDocument", "ResultEntry", "ChannelScore", "TrialRejectionProvenance", "RankingEntry"} <= reachable
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


def keys_of(served: Any, stored: Any) -> Any:
    """``served`` restricted, at every depth, to the keys ``stored`` has."""
    if isinstance(stored, dict) and isinstance(served, dict):
        return {key: keys_of(served.get(key), value) for key, value in stored.items()}
    if isinstance(stored, list) and isinstance(served, list):
        return [keys_of(item, original) for item, original in zip(served, stored, strict=False)]
    return served


def test_schema_version_1_keeps_its_numbers_and_gains_the_keys_it_left_out(client, v1_run):
    run_id, stored = v1_run
    served = client.get(f"/v1/runs/{run_id}/result").json()
    failed = next(index for index, entry in enumerate(stored["results"]) if "error" in entry)
    scored = next(index for index, entry in enumerate(stored["results"]) if "error" not in entry)
    assert served["results"][failed]["channels"] is None and served["results"][scored]["error"] is None
    # version 2 calls the channel statistic `statistic` (version 1: `t`) and names it per entry
    assert [channel["statistic"] for channel in served["results"][scored]["channels"]] == [
        channel["t"] for channel in stored["results"][scored]["channels"]
    ]
    assert served["results"][scored]["statistic_name"] == "welch_t"
    stored_boot, served_boot = stored["results"][scored]["bootstrap"], served["results"][scored]["bootstrap"]
    assert (served_boot["spread_low"], served_boot["spread_high"]) == (stored_boot["ci_low"], stored_boot["ci_high"])
    assert served_boot["subset_mean"] is None and served["results"][scored]["mean_welch_t"] is None
    # Keys added to the document later (null in a converted document) are left out of the comparison.
    assert served["group"] == stored["group"] and keys_of(served["ranking"], stored["ranking"]) == stored["ranking"]
    record = stored["results"][failed]["provenance"][0]
    served_record = served["results"][failed]["provenance"][0]
    assert {key: served_record[key] for key in ("step", "params", "trials_removed", "warnings")} == {
        key: record[key] for key in ("step", "params", "trials_removed", "warnings")
    }


def test_a_schema_version_1_result_is_exported_as_csv_and_reported(client, v1_run):
    run_id, stored = v1_run
    table = client.get(f"/v1/runs/{run_id}/result", params={"format": "csv"})
    assert table.status_code == 200
    channels = sum(len(entry.get("channels") or [None]) for entry in stored["results"])
    assert len(table.text.strip().splitlines()) == 1 + channels
    report = client.get(f"/v1/runs/{run_id}/report")
    assert report.status_code == 200 and "Run report" in report.text


# A LIMS integrator's view: a client generated from /openapi.json by openapi-python-client (an outside tool).
GENERATOR_CONFIG = "post_hooks: []\n"  # no formatter run on the generated code: it is only imported
IMAGE_ONLY_WARNING = "Unsupported content_type image/png, image/svg+xml"


@pytest.fixture(scope="module")
def generated_client(service: LiveService, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    """The package openapi-python-client generates from the served /openapi.json, imported, and its output."""
    folder = tmp_path_factory.mktemp("generated")
    with service.client() as client:
        (folder / "openapi.json").write_text(client.get("/openapi.json").text)
    (folder / "config.yaml").write_text(GENERATOR_CONFIG)
    generator = Path(sys.executable).with_name("openapi-python-client")
    command = [str(generator), "generate", "--path", "openapi.json", "--output-path", "lims_client"]
    command += ["--meta", "none", "--config", "config.yaml"]
    finished = subprocess.run(command, cwd=folder, capture_output=True, text=True, timeout=120, check=False)
    assert finished.returncode == 0, finished.stdout + finished.stderr
    sys.path.insert(0, str(folder))
    try:
        yield importlib.import_module("lims_client.models"), finished.stdout + finished.stderr
    finally:
        sys.path.remove(str(folder))
        for name in [name for name in sys.modules if name == "lims_client" or name.startswith("lims_client.")]:
            del sys.modules[name]


def untyped_values(parsed: Any, path: str = "document") -> Iterator[str]:
    """Where the parsed tree holds a value the generated classes did not type: a key in the
    ``additional_properties`` of a class that has declared fields, or a plain dict or list of dicts left
    as parsed JSON. A map class (only ``additional_properties``, with typed values) is walked into."""
    if isinstance(parsed, list):
        for index, item in enumerate(parsed):
            yield from untyped_values(item, f"{path}[{index}]")
    elif isinstance(parsed, dict):
        yield path
    elif attrs.has(type(parsed)):
        declared = [field.name for field in attrs.fields(type(parsed)) if field.name != "additional_properties"]
        extra = getattr(parsed, "additional_properties", {})
        if declared and extra:
            yield f"{path}: {sorted(extra)}"
        for name in declared:
            yield from untyped_values(getattr(parsed, name), f"{path}.{name}")
        if not declared:
            for key, value in extra.items():
                yield from untyped_values(value, f"{path}[{key!r}]")


@pytest.mark.slow
def test_the_generated_client_has_every_json_operation_without_warnings(generated_client):
    _models, output = generated_client
    warnings = [block for block in output.split("WARNING")[1:]]
    assert all(IMAGE_ONLY_WARNING in block for block in warnings), output  # the PNG/SVG figures, not JSON
    assert "ERROR" not in output, output
    assert hasattr(_models, "UploadEpochSetV1StudiesCodeEpochSetsPostJsonBody")  # the JSON epoch-set upload


@pytest.mark.slow
def test_the_generated_client_parses_a_real_result_with_every_value_typed(generated_client, real_result):
    models, _output = generated_client
    parsed = models.RunResultDocument.from_dict(real_result)
    assert list(untyped_values(parsed)) == []
    assert parsed.to_dict() == real_result  # nothing lost or parsed as the wrong class (step records are a union)


@pytest.mark.slow
def test_the_generated_client_parses_a_converted_schema_version_1_result(generated_client, client, v1_run):
    models, _output = generated_client
    served = client.get(f"/v1/runs/{v1_run[0]}/result").json()
    parsed = models.RunResultDocument.from_dict(served)
    assert list(untyped_values(parsed)) == [] and parsed.to_dict() == served
