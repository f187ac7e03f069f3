import itertools

import httpx
import pytest

from tests.support.live import LOOPBACK_NETWORK, LiveService, start_service

_study_numbers = itertools.count(1)


@pytest.fixture(scope="session")
def service(tmp_path_factory: pytest.TempPathFactory) -> LiveService:
    """One real API process and one real worker process for the API tests."""
    # Webhook tests receive on 127.0.0.1, which webhooks may only reach when the network is allowed.
    live = start_service(tmp_path_factory.mktemp("service"), webhook_allowed_networks=LOOPBACK_NETWORK)
    yield live
    live.stop()


@pytest.fixture()
def client(service: LiveService) -> httpx.Client:
    """A client of the shared service sending its admin key."""
    with service.client() as http:
        yield http


@pytest.fixture()
def study(client: httpx.Client, request: pytest.FixtureRequest) -> str:
    """A fresh study whose code is the test's name."""
    name = "".join(c if c.isalnum() or c in "-_." else "-" for c in request.node.name)
    code = f"s{next(_study_numbers)}-{name}"[:64]
    answer = client.post("/v1/studies", json={"code": code, "title": f"study of {request.node.name}"})
    assert answer.status_code == 201, answer.text
    return code


@pytest.fixture(scope="session")
def idle_service(tmp_path_factory: pytest.TempPathFactory) -> LiveService:
    """An API with no worker, logging at INFO (for readiness, logs and schema tests)."""
    live = start_service(tmp_path_factory.mktemp("idle"), n_workers=0, log_level="INFO")
    yield live
    live.stop()
