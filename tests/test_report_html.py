"""report.html without a browser: self-contained, every plot present and a real image."""

from __future__ import annotations

import base64
import io
import json
from html.parser import HTMLParser
from pathlib import Path

import pytest
from PIL import Image

PLOTS = (
    "share distribution",
    "outside share by market over time",
    "price dispersion by product",
    "ledger per file",
    "zero-share counts",
    "first-stage strength",
    "market-size sensitivity",
    "own-price elasticities",
)


class Collector(HTMLParser):
    """Every element's attributes and the page's text."""

    def __init__(self) -> None:
        super().__init__()
        self.elements: list[tuple[str, dict[str, str]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.elements.append((tag, {k: v or "" for k, v in attrs}))

    def handle_data(self, data: str) -> None:
        self.text.append(data)


@pytest.fixture(scope="module")
def page(shared_export_build: Path) -> tuple[Collector, Path]:
    build = shared_export_build
    collector = Collector()
    collector.feed((build / "report.html").read_text(encoding="utf-8"))
    return collector, build


def test_report_fetches_nothing_from_outside(page) -> None:
    collector, _ = page
    links = [
        attrs[name] for _, attrs in collector.elements for name in ("src", "href") if name in attrs
    ]
    assert links and all(link.startswith("data:image/png;base64,") for link in links)
    [policy] = [a["content"] for t, a in collector.elements if a.get("http-equiv")]
    assert "default-src 'none'" in policy
    assert not [t for t, _ in collector.elements if t in ("script", "link", "iframe")]


def test_every_plot_is_an_inline_png_with_a_size(page) -> None:
    collector, _ = page
    images = {a["alt"]: a["src"] for t, a in collector.elements if t == "img"}
    assert set(images) == set(PLOTS)
    for alt, src in images.items():
        data = base64.b64decode(src.removeprefix("data:image/png;base64,"))
        with Image.open(io.BytesIO(data)) as image:
            assert image.format == "PNG", alt
            assert image.width >= 400 and image.height >= 200, alt


def test_report_shows_the_quick_logit_of_the_manifest(page) -> None:
    collector, build = page
    manifest = json.loads((build / "manifest.json").read_text())
    text = " ".join(collector.text)
    assert manifest["build_id"] in text
    for estimate in manifest["quick_logit"]:
        assert f"{estimate['price_coefficient']:.4f}" in text
        assert f"{estimate['elasticity_median']:.3f}" in text
    for warning in manifest["warnings"]:
        assert warning in text
