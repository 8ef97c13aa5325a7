"""The calendar's first and last sale day: from the ledger when it accounts for every stored line
(one row per file, whatever the history), from the lines themselves when it does not."""

from __future__ import annotations

import shutil
from datetime import date, timedelta
from pathlib import Path

import pytest

from demandprep import pipeline
from demandprep.config import load_config
from demandprep.market.inputs import create_input_views
from demandprep.warehouse import open_warehouse

SALE_DATES = "select first_date, last_date from market_input_sale_dates"
LINE_DATES = "select min(sold_at)::date, max(sold_at)::date from raw_lines"


@pytest.fixture()
def ingested(tmp_path: Path, coffee_sample: Path):
    """A private copy of the sample, ingested; yields an open warehouse connection."""
    folder = tmp_path / "sample"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config = load_config(folder / "demandprep.toml")
    pipeline.run_ingest(config)
    with open_warehouse(config.warehouse) as con:
        yield con


def test_the_ledger_gives_the_same_sale_days_as_the_lines(ingested):
    create_input_views(ingested)

    assert ingested.execute(SALE_DATES).fetchall() == ingested.execute(LINE_DATES).fetchall()


def test_the_sale_days_come_from_the_ledger_when_it_accounts_for_every_line(ingested):
    # moved in the ledger only: the days follow it, so the lines were not read for them
    (last,) = ingested.execute(LINE_DATES).fetchone()[1:]
    ingested.execute(
        "update ledger set last_sold_at = last_sold_at + interval 3 day "
        "where source = 'receipts' and status = 'current' and last_sold_at::date = $last",
        {"last": last},
    )
    create_input_views(ingested)

    assert ingested.execute(SALE_DATES).fetchone()[1] == last + timedelta(days=3)


def test_a_line_the_ledger_does_not_count_sends_the_calendar_to_the_lines(ingested):
    # a line written by hand, outside any file's count: the ledger no longer accounts for
    # every line, so the days are read from the lines, the hand-written one included
    ingested.execute(
        "insert into raw_lines select * replace (timestamp '2030-06-01 10:00' as sold_at) "
        "from raw_lines limit 1"
    )
    create_input_views(ingested)

    assert ingested.execute(SALE_DATES).fetchone()[1] == date(2030, 6, 1)


def test_a_current_file_with_lines_but_no_sale_days_sends_the_calendar_to_the_lines(ingested):
    # a ledger row without its days (as a warehouse from before they were kept could have)
    (first,) = ingested.execute(LINE_DATES).fetchone()[:1]
    ingested.execute(
        "update ledger set first_sold_at = null, last_sold_at = null "
        "where source = 'receipts' and status = 'current' and first_sold_at::date = $first",
        {"first": first},
    )
    create_input_views(ingested)

    assert ingested.execute(SALE_DATES).fetchall() == ingested.execute(LINE_DATES).fetchall()
