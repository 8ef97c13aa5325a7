"""The report's choice section adds up per-day counts the choice build keeps with `choices`
(choices/report_counts.py): after a night that replaced a week's rows they equal counts over
the whole table, made here by direct queries."""

from __future__ import annotations

import shutil
from pathlib import Path

import duckdb
import pytest
from test_incremental_build import LAST_DAY, RECEIPTS, build

from demandprep.config import load_config
from demandprep.export import report_data
from demandprep.warehouse import open_warehouse

pytestmark = pytest.mark.usefixtures("one_line_report")

DIRECT_SUMMARY = """
select count(*) filter (where chosen), count(*), count(*) filter (where chosen and holdout)
from choices
"""
DIRECT_OFFERED = """
select alternatives, count(*) as occasions
from (
    select occasion, count(*) as alternatives from choices group by occasion
)
group by alternatives order by alternatives
"""
DIRECT_CHOSEN = """
select alternative, count(*) / (select count(*) from choices where chosen) as share
from choices where chosen
group by alternative order by share desc, alternative limit 20
"""
DIRECT_LOYALTY = """
select least(floor(loyalty * 10), 9) / 10 as low, count(loyalty) as rows
from choices where not burn_in and loyalty is not null
group by 1 order by 1
"""


@pytest.fixture()
def world(tmp_path: Path, coffee_sample: Path) -> Path:
    """A private copy of the sample (choices on) with its last day held back."""
    folder = tmp_path / "world"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    (folder / RECEIPTS / LAST_DAY).rename(tmp_path / LAST_DAY)
    config = folder / "demandprep.toml"
    text = config.read_text(encoding="utf-8")
    assert "loyalty_burn_in_days = 56" in text
    # a short burn-in, so most of the sample's seven weeks have loyalty
    config.write_text(text.replace("loyalty_burn_in_days = 56", "loyalty_burn_in_days = 7"))
    return folder


def report_numbers(con: duckdb.DuckDBPyConnection) -> dict:
    """What the report shows, from the kept counts."""
    summary = report_data.choice_summary(con)
    loyalty = report_data.loyalty_distribution(con)
    return {
        "summary": (summary["occasions"], summary["rows"], summary["holdout_occasions"]),
        "offered": [tuple(r) for r in report_data.alternatives_per_occasion(con).itertuples(False)],
        "chosen": [tuple(r) for r in report_data.chosen_shares(con).itertuples(False)],
        "loyalty": [tuple(r) for r in loyalty.itertuples(False) if r.rows > 0],
    }


def direct_numbers(con: duckdb.DuckDBPyConnection) -> dict:
    """The same, counted over the whole `choices` table."""
    return {
        "summary": con.execute(DIRECT_SUMMARY).fetchall()[0],
        "offered": con.execute(DIRECT_OFFERED).fetchall(),
        "chosen": con.execute(DIRECT_CHOSEN).fetchall(),
        "loyalty": con.execute(DIRECT_LOYALTY).fetchall(),
    }


def test_the_kept_counts_after_a_night_equal_counts_over_the_whole_table(world, tmp_path):
    build(world)
    config = load_config(world / "demandprep.toml")
    with open_warehouse(config.warehouse) as con:
        before = con.execute("select count(*) from choice_report_counts").fetchone()[0]
        # a planted count on a day before the week the night touches survives it: kept
        planted = con.execute(
            "update choice_report_counts set count = count + 1000000 "
            "where day = '2024-01-16' and measure = 'rows'"
        ).fetchone()[0]
    assert before > 100 and planted == 1
    shutil.copy(tmp_path / LAST_DAY, world / RECEIPTS / LAST_DAY)
    build(world)
    with open_warehouse(config.warehouse) as con:
        shown, direct = report_numbers(con), direct_numbers(con)
        occasions, rows, holdout = direct.pop("summary")
        assert shown.pop("summary") == (occasions, rows + 1000000, holdout)
        assert shown == direct
        assert len(direct["offered"]) > 1 and len(direct["loyalty"]) > 3
        con.execute(
            "update choice_report_counts set count = count - 1000000 "
            "where day = '2024-01-16' and measure = 'rows'"
        )
        assert report_numbers(con)["summary"] == (occasions, rows, holdout)
