"""Access control over every route: no key, a revoked key, a key for another study, read vs write vs admin."""

import itertools
import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import httpx
import pytest

from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import LiveService, free_port, run_cli, start_service, wait_for_run

_seeds = itertools.count(1000)
_codes = itertools.count(1)


@dataclass
class World:
    """Study A with an epoch set, a succeeded run and a webhook; study B; keys of every kind."""

    service: LiveService
    admin: httpx.Client
    study: str
    other_study: str
    epoch_set: str
    run: str
    webhook: str
    tokens: dict[str, str | None]

    def fresh_epoch_set(self) -> str:
        return upload(self.admin, self.study, npz_bytes(small_epochs(seed=next(_seeds)))).json()["id"]

    def fresh_run(self) -> str:
        return self.admin.post("/v1/runs", json=run_body(self.study, self.epoch_set)).json()["id"]

    def fresh_webhook(self) -> str:
        return self.admin.post(f"/v1/studies/{self.study}/webhooks", json=WEBHOOK).json()["id"]


# Port 9 (discard) on loopback: nothing listens, so a delivery attempt fails at once and goes nowhere else.
WEBHOOK = {"url": "http://127.0.0.1:9/hook"}


LOCK = {"pipeline": {"name": "raw", "steps": []}, "scoring": SCORING}


def run_body(study: str, epoch_set: str) -> dict:
    return {"study": study, "epoch_sets": [epoch_set], "pipelines": [{"name": "raw", "steps": []}], "scoring": SCORING}


@pytest.fixture(scope="module")
def world(service: LiveService) -> World:
    admin = service.client()
    study, other = f"acc-A-{free_port()}", f"acc-B-{free_port()}"
    for code in (study, other):
        assert admin.post("/v1/studies", json={"code": code, "title": "access"}).status_code == 201
    epoch_set = upload(admin, study, npz_bytes(small_epochs(seed=999))).json()["id"]
    run = admin.post("/v1/runs", json=run_body(study, epoch_set)).json()["id"]
    assert wait_for_run(admin, run)["status"] == "succeeded"
    webhook = admin.post(f"/v1/studies/{study}/webhooks", json=WEBHOOK).json()["id"]
    with ThreadPoolExecutor(max_workers=4) as pool:
        revoked, other_write, read, write = pool.map(
            lambda role_study: service.create_key(*role_study),
            [("write", study), ("write", other), ("read", study), ("write", study)],
        )
    service.revoke_key(revoked)
    tokens = {
        "none": None,
        "revoked": revoked,
        "other study": other_write,
        "read": read,
        "write": write,
        "admin": service.admin_token,
    }
    yield World(service, admin, study, other, epoch_set, run, webhook, tokens)
    admin.close()


@dataclass(frozen=True)
class Route:
    method: str
    path: str
    need: str  # "public", "any key", "admin", "read" or "write"
    request: Callable[[World], tuple[str, dict]]
    # The answer of a caller the route lets through; a route sent a deliberately bad body says so here.
    passed: Callable[[httpx.Response], bool] = lambda answer: answer.is_success


def _get(url: Callable[[World], str]) -> Callable[[World], tuple[str, dict]]:
    return lambda w: (url(w), {})


ROUTES = [
    Route("GET", "/healthz", "public", _get(lambda w: "/healthz")),
    Route("GET", "/readyz", "public", _get(lambda w: "/readyz")),
    Route("GET", "/metrics", "admin", _get(lambda w: "/metrics")),
    Route(
        "POST",
        "/v1/studies",
        "admin",
        lambda w: ("/v1/studies", {"json": {"code": f"acc-new-{next(_codes)}-{free_port()}", "title": "t"}}),
    ),
    Route("GET", "/v1/studies", "any key", _get(lambda w: "/v1/studies")),
    Route("GET", "/v1/studies/{code}", "read", _get(lambda w: f"/v1/studies/{w.study}")),
    Route(
        "POST",
        "/v1/studies/{code}/epoch-sets",
        "write",
        lambda w: (
            f"/v1/studies/{w.study}/epoch-sets",
            {"data": {"subject": "sub-09"}, "files": {"file": ("e.npz", npz_bytes(small_epochs(seed=next(_seeds))))}},
        ),
    ),
    Route("GET", "/v1/studies/{code}/epoch-sets", "read", _get(lambda w: f"/v1/studies/{w.study}/epoch-sets")),
    Route(
        "GET",
        "/v1/studies/{code}/epoch-sets/{epoch_set_id}",
        "read",
        _get(lambda w: f"/v1/studies/{w.study}/epoch-sets/{w.epoch_set}"),
    ),
    Route(
        "DELETE",
        "/v1/studies/{code}/epoch-sets/{epoch_set_id}",
        "write",
        _get(lambda w: f"/v1/studies/{w.study}/epoch-sets/{w.fresh_epoch_set()}"),
    ),
    Route("POST", "/v1/runs", "write", lambda w: ("/v1/runs", {"json": run_body(w.study, w.epoch_set)})),
    Route("GET", "/v1/runs", "any key", _get(lambda w: "/v1/runs")),
    Route("GET", "/v1/runs/{run_id}", "read", _get(lambda w: f"/v1/runs/{w.run}")),
    Route("DELETE", "/v1/runs/{run_id}", "write", _get(lambda w: f"/v1/runs/{w.fresh_run()}")),
    Route("GET", "/v1/runs/{run_id}/result", "read", _get(lambda w: f"/v1/runs/{w.run}/result")),
    Route(
        "POST", "/v1/studies/{code}/webhooks", "write", lambda w: (f"/v1/studies/{w.study}/webhooks", {"json": WEBHOOK})
    ),
    Route("GET", "/v1/studies/{code}/webhooks", "write", _get(lambda w: f"/v1/studies/{w.study}/webhooks")),
    Route(
        "GET",
        "/v1/studies/{code}/webhooks/{webhook_id}",
        "write",
        _get(lambda w: f"/v1/studies/{w.study}/webhooks/{w.webhook}"),
    ),
    Route(
        "DELETE",
        "/v1/studies/{code}/webhooks/{webhook_id}",
        "write",
        _get(lambda w: f"/v1/studies/{w.study}/webhooks/{w.fresh_webhook()}"),
    ),
    Route(
        "GET",
        "/v1/studies/{code}/webhooks/{webhook_id}/deliveries",
        "write",
        _get(lambda w: f"/v1/studies/{w.study}/webhooks/{w.webhook}/deliveries"),
    ),
    # A file that is no recording: a caller let through gets 422 for the file, not 401, 403 or 404.
    Route(
        "POST",
        "/v1/studies/{code}/recordings",
        "write",
        lambda w: (
            f"/v1/studies/{w.study}/recordings",
            {
                "data": {"subject": "sub-09", "epoching": '{"tmin": -0.2, "tmax": 0.5, "conditions": {"a": ["1"]}}'},
                "files": {"file": ("r.edf", b"not a recording")},
            },
        ),
        passed=lambda answer: answer.status_code == 422,
    ),
    Route("GET", "/v1/runs/{run_id}/report", "read", _get(lambda w: f"/v1/runs/{w.run}/report")),
    Route(
        "GET", "/v1/runs/{run_id}/figures/{name}.{fmt}", "read", _get(lambda w: f"/v1/runs/{w.run}/figures/kept.svg")
    ),
    Route("GET", "/v1/studies/{code}/report", "read", _get(lambda w: f"/v1/studies/{w.study}/report")),
    # Last: once the study has a locked pipeline, every upload queues a run, and an epoch set a run refers to
    # cannot be deleted, so the routes above must not see the lock.
    Route(
        "POST",
        "/v1/studies/{code}/locked-pipeline",
        "write",
        lambda w: (f"/v1/studies/{w.study}/locked-pipeline", {"json": LOCK}),
    ),
    Route(
        "GET",
        "/v1/studies/{code}/locked-pipeline",
        "read",
        lambda w: (
            w.admin.post(f"/v1/studies/{w.study}/locked-pipeline", json=LOCK).raise_for_status()
            and f"/v1/studies/{w.study}/locked-pipeline",
            {},
        ),
    ),
]
CALLERS = ("none", "revoked", "other study", "read", "write", "admin")

# What each kind of caller gets, by what the route needs: "ok" is any 2xx.
EXPECTED = {
    "public": dict.fromkeys(CALLERS, "ok"),
    "any key": {"none": 401, "revoked": 401, "other study": "ok", "read": "ok", "write": "ok", "admin": "ok"},
    "admin": {"none": 401, "revoked": 401, "other study": 403, "read": 403, "write": 403, "admin": "ok"},
    "read": {"none": 401, "revoked": 401, "other study": 404, "read": "ok", "write": "ok", "admin": "ok"},
    "write": {"none": 401, "revoked": 401, "other study": 404, "read": 403, "write": "ok", "admin": "ok"},
}


def test_the_matrix_names_every_route_of_the_api(world):
    documented = {
        (method.upper(), path)
        for path, item in world.admin.get("/openapi.json").json()["paths"].items()
        for method in item
    }
    assert documented == {(route.method, route.path) for route in ROUTES}


@pytest.mark.parametrize("route", ROUTES, ids=[f"{r.method} {r.path}" for r in ROUTES])
def test_each_caller_gets_the_answer_its_key_allows(world, route):
    answers = {}
    for caller in CALLERS:
        url, options = route.request(world)
        with world.service.client(world.tokens[caller]) as http:
            answer = http.request(route.method, url, **options)
        expected = EXPECTED[route.need][caller]
        answers[caller] = "ok" if route.passed(answer) and expected == "ok" else answer.status_code
        if not answer.is_success:
            assert answer.headers["content-type"].startswith("application/problem+json"), answer.text
    assert answers == EXPECTED[route.need]


def test_a_401_says_how_to_authenticate(world):
    answer = httpx.get(f"{world.service.base_url}/v1/studies")
    assert answer.status_code == 401
    assert answer.headers["www-authenticate"].startswith("Bearer")
    assert "Authorization: Bearer" in answer.json()["detail"]


def test_a_study_the_key_does_not_cover_looks_exactly_like_a_missing_one(world):
    missing = "acc-no-such-study"
    with world.service.client(world.tokens["other study"]) as http:
        hidden = http.get(f"/v1/studies/{world.study}")
        absent = http.get(f"/v1/studies/{missing}")
    assert hidden.status_code == absent.status_code == 404
    assert hidden.json() | {"detail": hidden.json()["detail"].replace(world.study, "X")} == absent.json() | {
        "detail": absent.json()["detail"].replace(missing, "X")
    }


def test_a_run_the_key_does_not_cover_looks_exactly_like_a_missing_one(world):
    missing = "run_0000000000000000"
    with world.service.client(world.tokens["other study"]) as http:
        hidden = http.get(f"/v1/runs/{world.run}")
        absent = http.get(f"/v1/runs/{missing}")
    assert hidden.status_code == absent.status_code == 404
    assert hidden.json()["detail"].replace(world.run, "X") == absent.json()["detail"].replace(missing, "X")


def test_listings_show_only_the_studies_and_runs_the_key_covers(world):
    with world.service.client(world.tokens["other study"]) as http:
        studies = [study["code"] for study in http.get("/v1/studies").json()]
        runs = http.get("/v1/runs").json()["runs"]
        filtered = http.get("/v1/runs", params={"study": world.study})
    assert studies == [world.other_study]
    assert all(run["study"] == world.other_study for run in runs)
    assert filtered.status_code == 404


def test_refused_deletes_leave_everything_in_place(world):
    targets = [
        f"/v1/runs/{world.run}",
        f"/v1/studies/{world.study}/epoch-sets/{world.epoch_set}",
        f"/v1/studies/{world.study}/webhooks/{world.webhook}",
    ]
    for caller in ("none", "revoked", "other study", "read"):
        with world.service.client(world.tokens[caller]) as http:
            assert all(http.delete(target).status_code in (401, 403, 404) for target in targets)
    assert all(world.admin.get(target).status_code == 200 for target in targets)


def test_a_key_revoked_by_its_id_is_refused_at_once(world):
    token = world.service.create_key("read", world.study)
    with world.service.client(token) as http:
        assert http.get(f"/v1/studies/{world.study}").status_code == 200
        listing = run_cli(["keys", "list", "--data-dir", str(world.service.data_dir)], world.service.env)
        key_id = listing.stdout.strip().splitlines()[-1].split()[0]
        world.service.revoke_key(key_id)
        assert http.get(f"/v1/studies/{world.study}").status_code == 401
    assert token not in listing.stdout


def test_keys_are_stored_only_as_hashes(world):
    token = world.service.create_key("read", world.study)
    stored = [value for row in world.service.query("SELECT * FROM api_keys") for value in row]
    assert token not in stored
    assert any(isinstance(value, str) and len(value) == 64 for value in stored)


@pytest.mark.parametrize(
    "args", [["--role", "read"], ["--role", "admin", "--study", "X"], ["--role", "write", "--study", "no-such-study"]]
)
def test_keys_create_refuses_a_key_that_cannot_exist(world, args):
    finished = run_cli(["keys", "create", *args, "--data-dir", str(world.service.data_dir)], world.service.env)
    assert finished.returncode != 0 and "epoch-assay keys create:" in finished.stderr and finished.stdout == ""


@pytest.mark.parametrize("how", ["flag", "variable"])
def test_open_mode_is_refused_off_loopback(tmp_path, how):
    args = ["api", "--host", "0.0.0.0", "--port", str(free_port()), "--data-dir", str(tmp_path)]
    env = {key: value for key, value in os.environ.items() if key != "EPOCH_ASSAY_OPEN"}
    env.update({"EPOCH_ASSAY_OPEN": "1"} if how == "variable" else {})
    finished = run_cli(args + (["--open"] if how == "flag" else []), env, timeout_s=60)
    assert finished.returncode != 0
    assert "refusing" in finished.stderr and "0.0.0.0" in finished.stderr


def test_open_mode_on_loopback_needs_no_key(tmp_path):
    live = start_service(tmp_path, n_workers=0, open="1")
    try:
        with live.client(token=None) as http:
            assert http.post("/v1/studies", json={"code": "OPEN-1", "title": "t"}).status_code == 201
            assert [study["code"] for study in http.get("/v1/studies").json()] == ["OPEN-1"]
    finally:
        live.stop()
