"""report.html in a real browser: headless Chromium opens it from disk and renders every plot.

Chromium is driven over its DevTools protocol (a websocket on the loopback interface): the test
collects console messages, uncaught exceptions and browser log errors while the page loads,
reads every image's natural size and keeps a full-page screenshot in test-artifacts/.
Install on Debian: apt-get update && apt-get install -y chromium
"""

from __future__ import annotations

import base64
import json
import shutil
import subprocess
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path

import pytest
from websockets.sync.client import connect

pytestmark = pytest.mark.browser

ARTIFACTS = Path(__file__).resolve().parents[1] / "test-artifacts"
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--remote-debugging-port=0",
    "--window-size=1200,900",
)
GUARD_SECONDS = 60  # a hang guard for the browser, not a timing assertion
IMAGE_SIZES = (
    "Array.from(document.images).map(i => ({alt: i.alt, complete: i.complete, "
    "width: i.naturalWidth, height: i.naturalHeight}))"
)

needs_chromium = pytest.mark.skipif(
    CHROMIUM is None,
    reason="Chromium is not installed (apt-get update && apt-get install -y chromium)",
)


class Page:
    """One browser tab over the DevTools protocol, recording problems reported while it loads."""

    def __init__(self, websocket_url: str) -> None:
        self._socket = connect(websocket_url, max_size=None, open_timeout=GUARD_SECONDS)
        self._next_id = 0
        self.problems: list[str] = []
        self.loaded = False
        for domain in ("Page", "Runtime", "Log"):
            self.call(f"{domain}.enable")

    def call(self, method: str, **params) -> dict:
        """Send a command and wait for its answer, noting the events that arrive meanwhile."""
        self._next_id += 1
        self._socket.send(json.dumps({"id": self._next_id, "method": method, "params": params}))
        while True:
            message = json.loads(self._socket.recv(timeout=GUARD_SECONDS))
            if message.get("id") == self._next_id:
                if "error" in message:
                    raise AssertionError(f"{method}: {message['error']}")
                return message.get("result", {})
            self._note(message)

    def open(self, url: str) -> None:
        """Navigate and wait for the load event."""
        self.call("Page.navigate", url=url)
        deadline = time.monotonic() + GUARD_SECONDS
        while not self.loaded:
            if time.monotonic() > deadline:
                raise AssertionError(f"{url} never finished loading")
            self._note(json.loads(self._socket.recv(timeout=GUARD_SECONDS)))

    def evaluate(self, expression: str):
        """The JSON value of a JavaScript expression in the page."""
        result = self.call("Runtime.evaluate", expression=expression, returnByValue=True)
        return result["result"]["value"]

    def screenshot(self, path: Path) -> None:
        """Save a PNG of the whole page."""
        shot = self.call("Page.captureScreenshot", format="png", captureBeyondViewport=True)
        path.write_bytes(base64.b64decode(shot["data"]))

    def close(self) -> None:
        self._socket.close()

    def _note(self, message: dict) -> None:
        method, params = message.get("method"), message.get("params", {})
        if method == "Page.loadEventFired":
            self.loaded = True
        elif method == "Runtime.consoleAPICalled" and params["type"] in ("error", "assert"):
            self.problems.append(f"console.{params['type']}: {params['args']}")
        elif method == "Runtime.exceptionThrown":
            self.problems.append(f"exception: {params['exceptionDetails']}")
        elif method == "Log.entryAdded" and params["entry"]["level"] == "error":
            self.problems.append(f"log: {params['entry']['text']}")


@pytest.fixture()
def browser(tmp_path: Path) -> Iterator[Page]:
    profile = tmp_path / "chromium-profile"
    process = subprocess.Popen(
        [CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "about:blank"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        port = _devtools_port(profile / "DevToolsActivePort", process)
        page = Page(_page_websocket(port))
        yield page
        page.close()
    finally:
        process.terminate()
        try:
            process.wait(timeout=GUARD_SECONDS)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


@needs_chromium
def test_report_renders_in_chromium_with_every_plot_drawn(
    browser: Page, shared_export_build: Path
) -> None:
    report = shared_export_build / "report.html"
    browser.open(report.as_uri())
    images = browser.evaluate(IMAGE_SIZES)
    ARTIFACTS.mkdir(exist_ok=True)
    browser.screenshot(ARTIFACTS / "report.png")
    assert browser.problems == []
    assert len(images) == 8
    for image in images:
        assert image["complete"] and image["width"] > 0 and image["height"] > 0, image
    assert browser.evaluate("document.title").startswith("demandprep build ")
    assert (ARTIFACTS / "report.png").stat().st_size > 10_000


@needs_chromium
def test_the_browser_check_sees_console_errors_and_broken_images(
    browser: Page, tmp_path: Path
) -> None:
    # A control: the same checks must fail on a page that logs an error and has a broken image.
    page = tmp_path / "broken.html"
    page.write_text(
        "<!DOCTYPE html><html><body><img alt='broken' src='data:image/png;base64,AAAA'>"
        "<script>console.error('deliberate failure')</script></body></html>",
        encoding="utf-8",
    )
    browser.open(page.as_uri())
    [image] = browser.evaluate(IMAGE_SIZES)
    assert image["width"] == 0
    assert any("deliberate failure" in problem for problem in browser.problems)


def _devtools_port(active_port_file: Path, process: subprocess.Popen) -> int:
    deadline = time.monotonic() + GUARD_SECONDS
    while not active_port_file.exists() or not active_port_file.read_text().strip():
        if process.poll() is not None:
            raise AssertionError(f"chromium exited with code {process.returncode}")
        if time.monotonic() > deadline:
            raise AssertionError("chromium never opened its DevTools port")
        time.sleep(0.05)
    return int(active_port_file.read_text().splitlines()[0])


def _page_websocket(port: int) -> str:
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=GUARD_SECONDS) as r:
        targets = json.load(r)
    return next(t["webSocketDebuggerUrl"] for t in targets if t["type"] == "page")
