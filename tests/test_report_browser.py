"""report.html in a real browser: headless Chromium opens it from disk and renders every chart.

Chromium is driven over its DevTools protocol (a websocket on the loopback interface): the test
collects console messages, uncaught exceptions and browser log errors while the page loads,
reads every chart's drawn size and keeps full-page screenshots in test-artifacts/ at 800 and
1400 px wide. The screenshot covers the page's whole laid-out content, so a page wider than the
window gives a wider picture: that is the horizontal-overflow check (a control page shows it
can fail). Install on Debian: apt-get update && apt-get install -y chromium
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
    "--hide-scrollbars",  # so a screenshot is exactly the laid-out content, no scrollbar strip
    "--remote-debugging-port=0",
    "--window-size=1200,900",
)
GUARD_SECONDS = 60  # a hang guard for the browser, not a timing assertion
CHART_SIZES = (
    "Array.from(document.querySelectorAll('svg.chart')).map(s => {"
    "const box = s.getBoundingClientRect();"
    "return {label: s.getAttribute('aria-label'), width: box.width, height: box.height,"
    " right: box.right}; })"
)
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

    def set_width(self, width: int, height: int = 900) -> None:
        """Make the window `width` CSS pixels wide (device scale 1, desktop)."""
        self.call(
            "Emulation.setDeviceMetricsOverride",
            width=width,
            height=height,
            deviceScaleFactor=1,
            mobile=False,
        )

    def content_screenshot(self, path: Path) -> tuple[int, int]:
        """Save a PNG of everything laid out (not only the window); returns its pixel size."""
        size = self.call("Page.getLayoutMetrics")["cssContentSize"]
        clip = {"x": 0, "y": 0, "width": size["width"], "height": size["height"], "scale": 1}
        shot = self.call(
            "Page.captureScreenshot", format="png", captureBeyondViewport=True, clip=clip
        )
        data = base64.b64decode(shot["data"])
        path.write_bytes(data)
        # PNG specification: the IHDR chunk after the 8-byte signature holds width and height
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
        return int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")

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
def test_report_renders_in_chromium_with_every_chart_drawn(
    browser: Page, shared_export_build: Path
) -> None:
    report = shared_export_build / "report.html"
    browser.open(report.as_uri())
    charts = browser.evaluate(CHART_SIZES)
    ARTIFACTS.mkdir(exist_ok=True)
    browser.screenshot(ARTIFACTS / "report.png")
    assert browser.problems == []
    assert len(charts) == 12
    for chart in charts:
        assert chart["width"] > 300 and chart["height"] > 40, chart
    assert browser.evaluate("document.images.length") == 0
    assert " demandprep build " in browser.evaluate("document.title")
    assert (ARTIFACTS / "report.png").stat().st_size > 10_000


@needs_chromium
@pytest.mark.parametrize("width", [800, 1400])
def test_report_fits_the_window_at_800_and_1400_px(
    browser: Page, shared_export_build: Path, width: int
) -> None:
    browser.set_width(width)
    browser.open((shared_export_build / "report.html").as_uri())
    ARTIFACTS.mkdir(exist_ok=True)
    shot_width, shot_height = browser.content_screenshot(ARTIFACTS / f"report-{width}.png")
    assert browser.problems == []
    # no horizontal overflow: everything laid out fits the window's width
    assert shot_width == width and shot_height > 900
    assert browser.evaluate("document.documentElement.scrollWidth") == width
    charts = browser.evaluate(CHART_SIZES)
    assert all(0 < chart["right"] <= width for chart in charts), charts
    # the first screen shows the headline numbers
    assert browser.evaluate("document.getElementById('headline').getBoundingClientRect().top") < 900


@needs_chromium
def test_the_width_check_sees_a_page_wider_than_the_window(browser: Page, tmp_path: Path) -> None:
    # A control: the same measurement must report a page that overflows an 800 px window.
    page = tmp_path / "wide.html"
    page.write_text(
        "<!DOCTYPE html><html><body style='margin:0'><div style='width:1200px;height:50px'>"
        "</div></body></html>",
        encoding="utf-8",
    )
    browser.set_width(800)
    browser.open(page.as_uri())
    shot_width, _ = browser.content_screenshot(tmp_path / "wide.png")
    assert shot_width == 1200
    assert browser.evaluate("document.documentElement.scrollWidth") == 1200


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
