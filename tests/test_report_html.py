"""report.html without a browser: self-contained, inline SVG charts, the first screen's numbers,
the sections a build has (and only those), cautions and units named from the config."""

from __future__ import annotations

import json
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import duckdb
import pytest
from export_fixtures import export_config, fill_warehouse, fixture_context

from demandprep.export import report, report_data
from demandprep.export.quick_logit import quick_logit
from demandprep.export.report import ReportInputs, render_report

CHARTS = (
    "share distribution",
    "outside share by market over time",
    "price dispersion by product",
    "zero-share counts",
    "first-stage strength",
    "mean outside share",
    "market-size sensitivity",
    "own-price elasticities",
    "alternatives per occasion",
    "chosen shares",
    "loyalty distribution",
    "ledger per file",
)


class Collector(HTMLParser):
    """Every element's attributes, the page's text, and the text inside each svg by label."""

    def __init__(self) -> None:
        super().__init__()
        self.elements: list[tuple[str, dict[str, str]]] = []
        self.text: list[str] = []
        self.svg_text: dict[str, list[str]] = {}
        self._svg: str | None = None
        self._legend_depth = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        attributes = {k: v or "" for k, v in attrs}
        self.elements.append((tag, attributes))
        if tag == "svg":
            self._svg = attributes.get("aria-label", "")
            self.svg_text[self._svg] = []

    def handle_endtag(self, tag: str) -> None:
        if tag == "svg":
            self._svg = None

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if self._svg is not None:
            self.svg_text[self._svg].append(data)


def parsed(text: str) -> Collector:
    collector = Collector()
    collector.feed(text)
    return collector


@pytest.fixture(scope="module")
def page(shared_export_build: Path) -> tuple[Collector, Path]:
    build = shared_export_build
    return parsed((build / "report.html").read_text(encoding="utf-8")), build


@pytest.fixture()
def warehouse(tmp_path: Path):
    con = duckdb.connect()
    fill_warehouse(con, occasions=40)
    yield con, export_config(tmp_path)
    con.close()


def rendered(con, config, **changes) -> str:
    ctx = fixture_context(con, config)
    estimates = [e for name in config.market_size for e in quick_logit(con, config, name)]
    return render_report(ctx, ReportInputs("B1", "2024-01-01T00:00:00", _frame(), estimates))


def _frame():
    import pandas as pd

    return pd.DataFrame({"file": ["shares_visits.parquet"], "rows": [1]})


def test_report_fetches_nothing_and_runs_nothing(page) -> None:
    collector, _ = page
    links = [a[name] for _, a in collector.elements for name in ("src", "href") if name in a]
    assert links == []
    [policy] = [a["content"] for t, a in collector.elements if a.get("http-equiv")]
    assert "default-src 'none'" in policy
    tags = {t for t, _ in collector.elements}
    assert not tags & {"script", "link", "iframe", "img", "object", "embed"}
    assert not [a for _, a in collector.elements if any(k.startswith("on") for k in a)]


def test_every_chart_is_inline_svg_with_a_label_and_a_size(page) -> None:
    collector, _ = page
    charts = [a for t, a in collector.elements if t == "svg"]
    assert [a["aria-label"] for a in charts] == list(CHARTS)
    for chart in charts:
        width, height = (float(v) for v in chart["viewbox"].split()[2:])
        assert width == 720 and height >= 60, chart["aria-label"]


def test_report_shows_the_quick_logit_of_the_manifest(page) -> None:
    collector, build = page
    manifest = json.loads((build / "manifest.json").read_text())
    text = " ".join(collector.text)
    assert manifest["build_id"] in text
    for estimate in manifest["quick_logit"]:
        assert f"{estimate['price_coefficient']:.4f}" in text
        assert f"{estimate['elasticity_median']:.3f}" in text
        if estimate["method"] == "iv":
            assert f"{estimate['first_stage_f']:,.1f}" in text
            assert f"{estimate['first_stage_f_robust']:,.1f}" in text
    for warning in manifest["warnings"]:
        assert warning in text


def test_first_screen_has_project_headline_numbers_and_warnings_first(page) -> None:
    collector, build = page
    manifest = json.loads((build / "manifest.json").read_text())
    text = " ".join(collector.text)
    order = [t for t, a in collector.elements if t in ("h1", "section")]
    assert order[0] == "h1"
    sections = [a.get("id", "") for t, a in collector.elements if t == "section"]
    assert sections[:4] == ["headline", "warnings", "drift", "cautions"]
    assert manifest["config"]["project"]["name"] in text
    shares = __import__("pandas").read_parquet(build / "shares_visits.parquet")
    assert f"{shares.market.nunique():,}" in text
    markets = __import__("pandas").read_parquet(build / "markets_visits.parquet")
    assert f"{markets.outside_share.mean():.3f}" in text
    assert "mean outside share, visits" in text
    iv = next(e for e in manifest["quick_logit"] if e["method"] == "iv")
    assert (
        f"IV price coefficient (visits); first-stage F {iv['first_stage_f']:,.1f} classic, "
        f"{iv['first_stage_f_robust']:,.1f} robust"
    ) in text


def test_cautions_name_personal_data_diagnostics_and_decisions(page) -> None:
    text = " ".join(page[0].text)
    assert "pseudonyms" in text and "warehouse still holds the raw receipt lines" in text
    assert "depend on the market-size assumption" in text
    assert "analyst's own validated model and the rules that apply to them" in text


def test_first_stage_chart_is_on_a_log_scale_with_the_threshold_line(page) -> None:
    collector, build = page
    words = collector.svg_text["first-stage strength"]
    assert "partial F (log scale)" in words and "F = 10" in words
    manifest = json.loads((build / "manifest.json").read_text())
    # a log axis labels whole powers of ten around the F values and the threshold
    ticks = [w for w in words if w.replace(",", "").isdigit()]
    assert "10" in ticks and len(ticks) >= 2
    assert all(t in ("1", "10", "100", "1,000", "10,000") for t in ticks)
    f_build = manifest["facts"]["first_stage"]["partial_f"]
    assert f"F = {f_build:,.1f}" in words


def test_ledger_chart_has_no_legend_inside_and_notes_a_selection(warehouse, monkeypatch) -> None:
    con, config = warehouse
    page_text = rendered(con, config)
    full = parsed(page_text)
    reasons = [r for (r,) in con.execute("select distinct reason from ledger_reasons").fetchall()]
    # the reasons are named in a legend above the chart, never inside it over the bars
    assert reasons and not set(reasons) & set(full.svg_text["ledger per file"])
    legend_at = page_text.index('<p class="legend">', page_text.index("<h2>Ledger</h2>"))
    assert all(
        reason in page_text[legend_at : page_text.index("<svg", legend_at)] for reason in reasons
    )
    assert "showing the" not in " ".join(full.text)
    monkeypatch.setattr(report_data, "MAX_FILES", 1)
    files = report_data.current_file_count(con)
    text = " ".join(parsed(rendered(con, config)).text)
    assert f"showing the 1 files with the most quarantined rows of {files} current files" in text


def test_zero_share_section_counts_what_the_policy_dropped(warehouse) -> None:
    con, config = warehouse
    con.execute("create table market_zero_sales as select * from share_table limit 7")
    text = " ".join(parsed(rendered(con, config)).text)
    assert config.shares.zero_shares == "drop"
    assert "7 product-markets on the shelf without sales were dropped" in text


def test_currency_and_units_are_named_from_the_config(warehouse) -> None:
    con, config = warehouse
    project = config.project.model_copy(update={"currency": "NOK"})
    text = " ".join(parsed(rendered(con, config.model_copy(update={"project": project}))).text)
    unit = config.products.equivalent_unit
    named = "pack" if unit.kind == "item" else f"{unit.grams:g} g"
    assert f"prices in NOK per {named}" in text
    assert "currency units" in " ".join(parsed(rendered(con, config)).text)


def test_choice_section_counts_occasions_alternatives_and_holdout(warehouse) -> None:
    con, config = warehouse
    collector = parsed(rendered(con, config))
    text = " ".join(collector.text)
    # reference: counts straight from the choices table
    occasions, holdout = con.execute(
        "select count(distinct occasion), count(distinct chooser) filter (where holdout) "
        "from choices"
    ).fetchone()
    assert "Choice table" in text
    assert f"{occasions:,}" in text and f"{holdout:,}" in text
    assert {"alternatives per occasion", "chosen shares", "loyalty distribution"} <= set(
        collector.svg_text
    )


def test_choices_off_leaves_the_choice_section_out(warehouse) -> None:
    con, config = warehouse
    config = config.model_copy(
        update={"choices": config.choices.model_copy(update={"enabled": False})}
    )
    text = " ".join(parsed(rendered(con, config)).text)
    assert "Choice table" not in text and "choices off" in text


def test_market_build_off_says_so_and_leaves_market_sections_out(warehouse, monkeypatch) -> None:
    con, config = warehouse
    monkeypatch.setattr(report, "market_build_enabled", lambda config: False)
    collector = parsed(rendered(con, config))
    text = " ".join(collector.text)
    assert "market build off" in text
    for title in ("Shares", "Outside share", "Prices", "Instruments", "Quick logit"):
        assert title not in [t.strip() for t in collector.text]
    assert "share distribution" not in collector.svg_text


def test_same_build_gives_the_same_report_text(warehouse) -> None:
    con, config = warehouse
    assert rendered(con, config) == rendered(con, config)


def test_the_report_does_not_import_matplotlib() -> None:
    code = (
        "import sys, demandprep.export.build, demandprep.export.report; "
        "print('matplotlib' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
