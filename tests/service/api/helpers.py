"""Small steps of the API path that many tests take."""

import httpx

from tests.support.live import wait_for_run

SCORING = {"conditions": ["a", "b"], "window_s": [0.3, 0.5], "alpha": 0.05, "correction": "fdr_bh"}


def upload(
    client: httpx.Client,
    study: str,
    content: bytes,
    subject: str = "sub-01",
    session: str | None = "ses-01",
    filename: str = "epochs.npz",
) -> httpx.Response:
    data = {"subject": subject} | ({"session": session} if session else {})
    return client.post(
        f"/v1/studies/{study}/epoch-sets", data=data, files={"file": (filename, content, "application/octet-stream")}
    )


def run_and_wait(client: httpx.Client, body: dict) -> dict:
    """Create a run, wait for it, and return its result document (asserting success)."""
    created = client.post("/v1/runs", json=body)
    assert created.status_code == 202, created.text
    state = wait_for_run(client, created.json()["id"])
    assert state["status"] == "succeeded", state
    result = client.get(f"/v1/runs/{state['id']}/result")
    assert result.status_code == 200, result.text
    return result.json()


# What differs between two runs of one spec: the run id, timings, and the step-cache hits and misses
# (which depend on what other runs, on any worker, left in the shared cache before).
EXECUTION_FACTS = ("run", "seconds", "cache")


def without_timing(value):
    """A result document minus its EXECUTION_FACTS, at any depth: what one spec always gives."""
    if isinstance(value, dict):
        return {key: without_timing(item) for key, item in value.items() if key not in EXECUTION_FACTS}
    if isinstance(value, list):
        return [without_timing(item) for item in value]
    return value
