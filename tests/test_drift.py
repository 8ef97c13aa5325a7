"""Build-to-build drift: two builds of the sample that differ by one receipts file.

The expected changes are worked out here with pandas from the two build folders' own Parquet
files and manifests, apart from demandprep's drift code.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest

from demandprep.config import load_config
from demandprep.export.drift import TOP_CHANGES
from demandprep.pipeline import run_build, run_ingest

HELD_BACK = "receipts/2024/receipts_2024-01-10.csv.gz"
HELD_BACK_WEEK = "2024-01-08"


@pytest.fixture(scope="module")
def two_builds(tmp_path_factory, coffee_sample: Path) -> tuple[Path, Path]:
    folder = tmp_path_factory.mktemp("drift") / "sample"
    shutil.copytree(coffee_sample, folder)
    aside = folder.parent / "held_back.csv.gz"
    (folder / HELD_BACK).rename(aside)
    config = load_config(folder / "demandprep.toml")
    run_ingest(config)
    first, _ = run_build(config)
    aside.rename(folder / HELD_BACK)
    run_ingest(config)
    second, _ = run_build(config)
    return first, second


def manifest(build: Path) -> dict:
    return json.loads((build / "manifest.json").read_text(encoding="utf-8"))


def test_a_first_build_says_there_is_no_previous_build(two_builds) -> None:
    first, _ = two_builds
    drift = manifest(first)["since_last_build"]
    assert drift == {"previous_build": None, "summary": "no previous build"}
    assert "no previous build" in (first / "report.html").read_text(encoding="utf-8")


def test_drift_names_the_one_input_file_that_changed(two_builds) -> None:
    first, second = two_builds
    drift = manifest(second)["since_last_build"]
    assert drift["previous_build"] == first.name
    [added] = drift["inputs"]["added"]
    assert added.endswith(HELD_BACK)
    assert drift["inputs"]["gone"] == [] and drift["inputs"]["changed"] == []
    assert drift["config_changed"] is False
    assert drift["summary"].startswith("1 input files added, 0 gone, 0 changed; rows changed in ")


def test_rows_per_output_are_the_two_manifests_rows(two_builds) -> None:
    first, second = two_builds
    before = {o["path"]: o["rows"] for o in manifest(first)["outputs"] if "rows" in o}
    after = {o["path"]: o["rows"] for o in manifest(second)["outputs"] if "rows" in o}
    changed = {
        p: (before.get(p), after.get(p)) for p in before | after if before.get(p) != after.get(p)
    }
    rows = {
        r["path"]: (r["before"], r["after"]) for r in manifest(second)["since_last_build"]["rows"]
    }
    assert {p: v for p, v in rows.items() if v[0] != v[1]} == changed
    assert rows["ledger.parquet"][1] == rows["ledger.parquet"][0] + 1
    assert set(rows) == set(before) | set(after)


def test_markets_and_products_added_or_gone_match_the_files(two_builds) -> None:
    first, second = two_builds
    drift = manifest(second)["since_last_build"]
    assumption = drift["assumption"]
    markets = [pd.read_parquet(b / f"markets_{assumption}.parquet")["market"] for b in two_builds]
    products = [pd.read_parquet(b / f"shares_{assumption}.parquet")["product"] for b in two_builds]
    assert drift["markets"]["added"] == sorted(set(markets[1]) - set(markets[0]))
    assert drift["markets"]["gone"] == sorted(set(markets[0]) - set(markets[1]))
    assert drift["products"]["added"] == sorted(set(products[1]) - set(products[0]))
    assert drift["products"]["gone"] == sorted(set(products[0]) - set(products[1]))
    assert (drift["markets"]["before"], drift["markets"]["after"]) == (
        markets[0].nunique(),
        markets[1].nunique(),
    )


@pytest.mark.parametrize("column", ["share", "price"])
def test_largest_changes_are_matched_on_market_and_product(two_builds, column) -> None:
    first, second = two_builds
    drift = manifest(second)["since_last_build"]
    name = f"shares_{drift['assumption']}.parquet"
    keys = ["market", "product"]
    frames = [pd.read_parquet(b / name, columns=[*keys, column]) for b in two_builds]
    both = frames[0].merge(frames[1], on=keys, suffixes=("_before", "_after")).dropna()
    both["change"] = both[f"{column}_after"] - both[f"{column}_before"]
    both = both[both.change != 0]
    both["size"] = both.change.abs()
    expected = both.sort_values(["size", *keys], ascending=[False, True, True]).head(TOP_CHANGES)
    shown = drift[f"largest_{column}_changes"]
    assert [(r["market"], r["product"]) for r in shown] == list(
        zip(expected.market, expected["product"], strict=True)
    )
    assert [r["change"] for r in shown] == pytest.approx(list(expected.change), rel=1e-9)
    # the held-back day is in one week: only that week's markets can move
    assert shown and all(r["market"].endswith(f"/{HELD_BACK_WEEK}") for r in shown)


def test_quarantine_rates_first_stage_and_quick_logit_then_and_now(two_builds) -> None:
    first, second = two_builds
    drift = manifest(second)["since_last_build"]
    rates = []
    for build in two_builds:
        ledger = pd.read_parquet(build / "ledger.parquet")
        current = (
            ledger[ledger.status == "current"]
            .groupby("source")[["rows_read", "rows_quarantined"]]
            .sum()
        )
        rates.append(current.rows_quarantined / current.rows_read)
    shown = {r["source"]: (r["rate_before"], r["rate_after"]) for r in drift["quarantine"]}
    assert shown["receipts"] == pytest.approx((rates[0]["receipts"], rates[1]["receipts"]))
    facts = [manifest(b)["facts"]["first_stage"] for b in two_builds]
    assert drift["first_stage"]["partial_f"] == {
        "before": facts[0]["partial_f"],
        "after": facts[1]["partial_f"],
    }
    logits = [manifest(b)["quick_logit"] for b in two_builds]
    assert [
        (e["assumption"], e["method"], e["before"], e["after"]) for e in drift["quick_logit"]
    ] == [
        (a["assumption"], a["method"], a["price_coefficient"], b["price_coefficient"])
        for a, b in zip(logits[0], logits[1], strict=True)
    ]
    report = (second / "report.html").read_text(encoding="utf-8")
    assert "Since the last build" in report and first.name in report
    assert HELD_BACK.rsplit("/", 1)[-1] in report


def test_a_changed_config_is_named(tmp_path: Path) -> None:
    import duckdb
    from export_fixtures import export_config

    from demandprep.export.drift import since_last_build

    previous, folder = tmp_path / "previous", tmp_path / "now"
    previous.mkdir()
    folder.mkdir()
    (previous / "manifest.json").write_text(json.dumps({"config_hash": "older", "inputs": []}))
    current = {"inputs": [], "outputs": [], "facts": {}, "quick_logit": []}
    drift = since_last_build(duckdb.connect(), export_config(tmp_path), previous, folder, current)
    assert drift["config_changed"] is True
    assert drift["summary"].startswith("config changed; 0 input files added")
