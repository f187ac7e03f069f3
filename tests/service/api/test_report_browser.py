"""The run report in a real browser: Debian's headless Chromium, driven over its DevTools pipe.

The page is loaded from the live server (with the API key as a request header), every
network request is watched, every image is measured, and a full-page screenshot is kept in
``test-artifacts/`` for people to look at.
"""

import base64
import contextlib
import json
import os
import shutil
import subprocess
from pathlib import Path

import pytest

from tests.service.api.test_reports import scored  # noqa: F401 - the module's run, reused
from tests.support.live import REPO_ROOT

ARTIFACTS = REPO_ROOT / "test-artifacts"
CHROMIUM_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--remote-debugging-pipe",
]
PAGE_WIDTH_PX = 1100


def _chromium() -> str:
    found = shutil.which("chromium")
    if found is None:
        message = "chromium is not installed: run `make browser` (apt-get install -y chromium)"
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(message)
        pytest.skip(message)
    return found


class DevTools:
    """A Chromium process and the DevTools protocol over its pipe (fd 3 in, fd 4 out: NUL-ended JSON)."""

    def __init__(self, executable: str, profile: Path) -> None:
        to_browser_read, self._to_browser = os.pipe()
        self._from_browser, from_browser_write = os.pipe()

        def onto_fds_3_and_4() -> None:
            os.dup2(to_browser_read, 3)
            os.dup2(from_browser_write, 4)

        self.process = subprocess.Popen(
            [executable, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", "about:blank"],
            preexec_fn=onto_fds_3_and_4,
            close_fds=False,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        os.close(to_browser_read)
        os.close(from_browser_write)
        self._buffer = b""
        self._next_id = 0
        self.events: list[dict] = []

    def _read_message(self) -> dict:
        while b"\0" not in self._buffer:
            chunk = os.read(self._from_browser, 1 << 16)
            if not chunk:
                raise RuntimeError("chromium closed its DevTools pipe")
            self._buffer += chunk
        message, self._buffer = self._buffer.split(b"\0", 1)
        return json.loads(message)

    def call(self, method: str, session: str | None = None, **params: object) -> dict:
        self._next_id += 1
        request = {"id": self._next_id, "method": method, "params": params} | (
            {"sessionId": session} if session else {}
        )
        os.write(self._to_browser, json.dumps(request).encode() + b"\0")
        while True:
            message = self._read_message()
            if message.get("id") == self._next_id:
                if "error" in message:
                    raise RuntimeError(f"{method}: {message['error']}")
                return message["result"]
            self.events.append(message)

    def wait_for_event(self, method: str) -> dict:
        for event in self.events:
            if event.get("method") == method:
                return event
        while True:
            message = self._read_message()
            self.events.append(message)
            if message.get("method") == method:
                return message

    def close(self) -> None:
        with contextlib.suppress(RuntimeError, OSError):
            self.call("Browser.close")
        try:
            self.process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
        os.close(self._to_browser)
        os.close(self._from_browser)


@pytest.fixture(scope="module")
def rendered(service, scored, tmp_path_factory):  # noqa: F811 - pytest fixture by name
    """The report as Chromium loaded it: network events, image sizes and a screenshot path."""
    executable = _chromium()
    url = f"{service.base_url}/v1/runs/{scored[1]}/report"
    browser = DevTools(executable, tmp_path_factory.mktemp("chromium-profile"))
    try:
        target = browser.call("Target.createTarget", url="about:blank")["targetId"]
        session = browser.call("Target.attachToTarget", targetId=target, flatten=True)["sessionId"]
        browser.call("Network.enable", session)
        browser.call("Page.enable", session)
        browser.call("Network.setExtraHTTPHeaders", session, headers={"Authorization": f"Bearer {service.admin_token}"})
        browser.call(
            "Emulation.setDeviceMetricsOverride",
            session,
            width=PAGE_WIDTH_PX,
            height=900,
            deviceScaleFactor=1,
            mobile=False,
        )
        browser.call("Page.navigate", session, url=url)
        browser.wait_for_event("Page.loadEventFired")
        images = browser.call(
            "Runtime.evaluate",
            session,
            returnByValue=True,
            expression=(
                "Array.from(document.images).map(i => ({alt: i.alt, complete: i.complete, "
                "natural: [i.naturalWidth, i.naturalHeight], shown: [i.clientWidth, i.clientHeight]}))"
            ),
        )["result"]["value"]
        height = browser.call("Page.getLayoutMetrics", session)["cssContentSize"]["height"]
        browser.call(
            "Emulation.setDeviceMetricsOverride",
            session,
            width=PAGE_WIDTH_PX,
            height=int(height),
            deviceScaleFactor=1,
            mobile=False,
        )
        shot = browser.call("Page.captureScreenshot", session, format="png", captureBeyondViewport=True)["data"]
        ARTIFACTS.mkdir(exist_ok=True)
        screenshot = ARTIFACTS / "run-report.png"
        screenshot.write_bytes(base64.b64decode(shot))
        events = list(browser.events)
    finally:
        browser.close()
    return {"url": url, "events": events, "images": images, "screenshot": screenshot}


def _events(rendered, method: str) -> list[dict]:
    return [event["params"] for event in rendered["events"] if event.get("method") == method]


def test_report_loads_in_chromium_with_no_failed_request(rendered):
    assert _events(rendered, "Network.loadingFailed") == []
    statuses = [
        (params["response"]["url"], params["response"]["status"])
        for params in _events(rendered, "Network.responseReceived")
    ]
    assert (rendered["url"], 200) in statuses


def test_report_asks_the_network_for_nothing_but_itself(rendered):
    requested = {params["request"]["url"] for params in _events(rendered, "Network.requestWillBeSent")}
    assert {url for url in requested if not url.startswith("data:")} == {rendered["url"]}


def test_every_figure_in_the_report_has_a_non_zero_size(rendered):
    images = rendered["images"]
    assert len(images) == 7
    for image in images:
        assert image["complete"], image["alt"]
        assert min(image["natural"]) > 0 and min(image["shown"]) > 0, image


def test_screenshot_of_the_report_is_saved_as_an_artifact(rendered):
    assert rendered["screenshot"].read_bytes().startswith(b"\x89PNG\r\n\x1a\n")
