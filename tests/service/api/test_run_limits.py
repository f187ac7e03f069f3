"""Limits on what one request may ask for: pipelines × epoch sets per run, steps per pipeline; metrics for admins."""

import pytest

from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, start_service

STEP = {"step": "highpass", "cutoff_hz": 0.1}


@pytest.fixture(scope="module")
def limited(tmp_path_factory) -> LiveService:
    live = start_service(tmp_path_factory.mktemp("limits"), n_workers=0, max_run_units="3", max_steps_per_pipeline="2")
    yield live
    live.stop()


@pytest.fixture(scope="module")
def epoch_sets(limited) -> list[str]:
    with limited.client() as http:
        assert http.post("/v1/studies", json={"code": "LIM", "title": "limits"}).status_code == 201
        return [upload(http, "LIM", npz_bytes(small_epochs(seed=s)), subject=f"sub-{s}").json()["id"] for s in (1, 2)]


def _run(pipelines: list[dict], epoch_sets: list[str]) -> dict:
    return {"study": "LIM", "epoch_sets": epoch_sets, "pipelines": pipelines, "scoring": SCORING}


def test_a_run_of_more_pipeline_epoch_set_pairs_than_allowed_is_a_422_naming_the_setting(limited, epoch_sets):
    pipelines = [{"name": "raw", "steps": []}, {"name": "hp", "steps": [STEP]}]  # 2 × 2 = 4 pairs > 3
    with limited.client() as http:
        answer = http.post("/v1/runs", json=_run(pipelines, epoch_sets))
        assert answer.status_code == 422, answer.text
        assert "4 pairs" in answer.json()["detail"] and "EPOCH_ASSAY_MAX_RUN_UNITS" in answer.json()["detail"]
        assert http.get("/v1/runs", params={"study": "LIM"}).json()["runs"] == []


def test_a_run_within_the_limit_is_accepted(limited, epoch_sets):
    with limited.client() as http:
        answer = http.post("/v1/runs", json=_run([{"name": "raw", "steps": []}], epoch_sets))
    assert answer.status_code == 202, answer.text


def test_a_pipeline_of_more_steps_than_allowed_is_a_422(limited, epoch_sets):
    with limited.client() as http:
        answer = http.post("/v1/runs", json=_run([{"name": "long", "steps": [STEP, STEP, STEP]}], epoch_sets[:1]))
    assert answer.status_code == 422, answer.text
    assert answer.json()["errors"][0]["loc"] == ["body", "pipelines", 0, "steps"]


def test_metrics_are_for_admin_keys_only(limited, epoch_sets):
    with limited.client(limited.create_key("read", "LIM")) as http:
        assert http.get("/metrics").status_code == 403
    with limited.client() as http:
        assert http.get("/metrics").status_code == 200
