"""Every upload route and the run route, fuzzed with the hostile-input corpus (tests/corpus) on a real server.

Each answer must be a 4xx problem+json within the client's timeout, carry no server path and no
library traceback, and the service must still answer /healthz afterwards.
"""

import re

import httpx
import numpy as np
import pytest

from tests.corpus.cases import CASES, Case
from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, wait_for_run

# Generous for one request on a shared 2-core machine, far below what the cases would take unrefused.
ANSWER_TIMEOUT_S = 20.0
# What a leaked server path or library message looks like.
LEAK_PATTERNS = (
    re.compile(r"Traceback|File \"|site-packages|\.py\b"),
    re.compile(r"/tmp/|/var/|/home/|/usr/|/work/|epoch-assay-read-"),
    re.compile(r"\b(?:FileNotFoundError|OSError|ValueError|KeyError|IndexError|struct\.error|zipfile)\b"),
)


@pytest.fixture(scope="module")
def target(service: LiveService, client: httpx.Client, request: pytest.FixtureRequest) -> tuple[str, str]:
    """A study with one epoch set, for the cases to post into: (study code, epoch set id)."""
    code = "corpus"
    if client.get(f"/v1/studies/{code}").status_code == 404:
        assert client.post("/v1/studies", json={"code": code, "title": "hostile input"}).status_code == 201
    answer = upload(client, code, npz_bytes(small_epochs(seed=15)))
    assert answer.status_code in (200, 201), answer.text
    return code, answer.json()["id"]


@pytest.fixture(scope="module")
def client(service: LiveService) -> httpx.Client:
    with service.client(timeout=ANSWER_TIMEOUT_S) as http:
        yield http


def _send(client: httpx.Client, case: Case, study: str, epoch_set: str) -> httpx.Response:
    parts = case.build()
    if case.route == "run":
        body = parts["body"].replace("{{study}}", study).replace("{{epoch_set}}", epoch_set)
        return client.post("/v1/runs", content=body.encode(), headers={"Content-Type": "application/json"})
    if case.route == "epoch-set json":
        return client.post(
            f"/v1/studies/{study}/epoch-sets",
            content=parts["body"].encode(),
            headers={"Content-Type": "application/json"},
        )
    files = {"file": ("upload.bin", parts["file"], "application/octet-stream")}
    if case.route == "epoch-set file":
        return client.post(f"/v1/studies/{study}/epoch-sets", data={"subject": "sub-99"}, files=files)
    if parts.get("events") is not None:
        files["events"] = ("events.tsv", parts["events"], "text/tab-separated-values")
    data = {"subject": "sub-98", "epoching": parts["epoching"]}
    return client.post(f"/v1/studies/{study}/recordings", data=data, files=files)


@pytest.mark.parametrize("case", CASES, ids=[case.name for case in CASES])
def test_hostile_input_gets_a_4xx_in_our_own_words(client, target, case):
    answer = _send(client, case, *target)
    assert 400 <= answer.status_code < 500, answer.text[:2000]
    assert answer.headers["content-type"].startswith("application/problem+json")
    for pattern in LEAK_PATTERNS:
        assert not pattern.search(answer.text), (pattern.pattern, answer.text[:2000])


def test_the_service_still_answers_after_the_corpus(client):
    assert client.get("/healthz").status_code == 200
    assert client.get("/v1/studies/corpus/epoch-sets").status_code == 200


def test_maths_in_condition_and_pipeline_names_leaves_the_report_and_study_page_readable(client):
    # "$\frac$" is invalid mathtext: drawn as maths it failed every drawing of these pages (a lasting 500).
    label, pipeline = "$\\frac$", "$x^$ pipeline"
    assert client.post("/v1/studies", json={"code": "maths-labels", "title": "labels"}).status_code == 201
    epochs = small_epochs(seed=16)
    epochs = epochs.with_changes(labels=np.where(epochs.labels == "a", label, "b"))
    epoch_set = upload(client, "maths-labels", npz_bytes(epochs)).json()["id"]
    scoring = SCORING | {"conditions": [label, "b"]}
    body = {
        "study": "maths-labels",
        "epoch_sets": [epoch_set],
        "scoring": scoring,
        "pipelines": [{"name": pipeline, "steps": []}],
    }
    run = client.post("/v1/runs", json=body)
    assert run.status_code == 202, run.text
    assert wait_for_run(client, run.json()["id"])["status"] == "succeeded"
    assert client.get(f"/v1/runs/{run.json()['id']}/report").status_code == 200
    assert client.get("/v1/studies/maths-labels/report").status_code == 200
