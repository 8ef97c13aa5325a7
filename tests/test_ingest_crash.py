"""A crash in the middle of a large file leaves none of its rows; the next run ingests it whole.

The ingest runs in a child process that reports its progress on stdout; the test kills it with
SIGKILL as soon as the child says it is writing the large file's accepted rows (or, in the other
case, right after it read the file), then runs the ingest again and counts exactly.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import duckdb
import pytest

from demandprep.config import load_config
from demandprep.ingest.runner import ingest_all
from demandprep.warehouse import open_warehouse

LINES = 800_000
BAD_EVERY = 100_000  # every 100000th line has a field too many

CONFIG = """
[warehouse]
path = "warehouse/crash.duckdb"
memory_limit = "1GB"
threads = 2
temp_directory = "warehouse/tmp"

[sources.receipts]
files = ["receipts/*.csv"]
valid_from = "2024-01-01"
valid_to = "2024-12-31"

[sources.receipts.columns]
receipt = "ticket"
line = "row"
store = "shop"
sold_at = "stamp"
sku = "item"
quantity = "qty"
amount = "value"

[sources.catalogue]
files = ["catalogue.csv"]

[sources.catalogue.columns]
sku = "item"
category = "category"

[sources.stores]
files = ["stores.csv"]

[sources.stores.columns]
store = "shop"

[markets]
categories = ["coffee"]

[products]
keys = ["sku"]

[market_size.visits]
method = "visits"
units_per_visit = 1.0
"""

CHILD = textwrap.dedent(
    """
    import sys
    from demandprep.config import load_config
    from demandprep.pipeline import run_ingest

    def report(event, **info):
        if event == "file_step" and info["source"] == "receipts":
            print(info["step"], flush=True)

    run_ingest(load_config(sys.argv[1]), progress=report)
    print("finished", flush=True)
    """
)


def write_project(folder: Path) -> Path:
    """A project with one large receipts file; ticket T<k> is on line k + 1."""
    (folder / "receipts").mkdir(parents=True)
    (folder / "catalogue.csv").write_text("item,category\nK1,coffee\nK2,coffee\n")
    (folder / "stores.csv").write_text("shop\nS1\nS2\n")
    big = folder / "receipts" / "big.csv"
    con = duckdb.connect()
    # each line is written as one text value (no quoting), so a bad line can carry a field more
    con.execute(
        "copy (select text from (select 0 as k, 'ticket,row,shop,stamp,item,qty,value' as text "
        "union all select k, concat_ws(',', 'T' || k, 1, 'S' || (k % 2 + 1), "
        "strftime(timestamp '2024-01-01' + to_seconds(k * 17), '%Y-%m-%d %H:%M:%S'), "
        "'K' || (k % 2 + 1), 1, 4.5) || case when k % $every = 0 then ',extra' else '' end "
        "from range(1, $n + 1) t(k)) order by k) "
        f"to '{big}' (header false, quote '', delimiter '|')",
        {"n": LINES, "every": BAD_EVERY},
    )
    con.close()
    config = folder / "demandprep.toml"
    config.write_text(CONFIG)
    return config


def run_and_kill(config: Path, step: str) -> int:
    """Start the ingest in a child process and SIGKILL it when it reports `step`."""
    # the with block closes the output pipe once the child is gone
    with subprocess.Popen(
        [sys.executable, "-c", CHILD, str(config)], stdout=subprocess.PIPE, text=True
    ) as child:
        assert child.stdout is not None
        for line in child.stdout:
            if line.strip() in (step, "finished"):
                assert line.strip() == step, "the ingest finished before it could be killed"
                os.kill(child.pid, signal.SIGKILL)
                break
        return child.wait(timeout=120)


@pytest.mark.parametrize("step", ["inserting", pytest.param("staged", marks=pytest.mark.slow)])
def test_killed_ingest_leaves_nothing_and_the_rerun_loads_the_file_whole(
    tmp_path: Path, step: str
) -> None:
    config_path = write_project(tmp_path)
    assert run_and_kill(config_path, step) == -signal.SIGKILL
    config = load_config(config_path)
    bad = len(range(BAD_EVERY, LINES + 1, BAD_EVERY))
    with open_warehouse(config.warehouse) as con:
        assert con.execute("select count(*) from raw_lines").fetchone() == (0,)
        assert con.execute("select count(*) from ledger where source = 'receipts'").fetchone() == (
            0,
        )
        summary = ingest_all(con, config)
        (result,) = [r for r in summary.files if r.source == "receipts"]
        assert result.status == "new"
        assert (result.rows_read, result.rows_accepted) == (LINES, LINES - bad)
        assert result.quarantined == {"wrong_column_count": bad}
        assert con.execute("select count(*) from raw_lines").fetchone() == (LINES - bad,)
        assert con.execute(
            "select count(*) from (select receipt from raw_lines group by all having count(*) > 1)"
        ).fetchone() == (0,)
        # physical line numbers: the header is line 1, ticket T<k> is on line k + 1
        assert con.execute(
            "select count(*) from raw_lines where line_no <> substr(receipt, 2)::bigint + 1"
        ).fetchone() == (0,)
        assert con.execute("select min(line_no), max(line_no) from quarantine").fetchone() == (
            BAD_EVERY + 1,
            bad * BAD_EVERY + 1,
        )
