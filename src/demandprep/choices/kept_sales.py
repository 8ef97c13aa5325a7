"""The category's sale lines a build keeps from the last one, and those it reads again.

`choice_sales` (020: every sale and void line of the category, card or not, mapped to its
alternative) feeds the visits' purchases (035) and the prices (050 to 054). Its lines of a day
change only when a receipts file with lines of that day arrives or leaves, which the visit scope
already tells (028: `visits_from`, the first day any such file touches; a build is full when the
config, a reference file, the alternative map or demandprep changed). So after a complete build
it is kept as `choice_state_sales`, and the next incremental build renames it back, deletes its
lines from `visits_from` on and reads only those days' lines from `raw_lines` (a 39.8M-line
warehouse's 1.6 s a night, most of `choice_inputs`).

It runs in the inputs stage, after the visit scope is planned: in a partitioned build's bucket
that stage is the one that reads every partition's lines (`partitioned/buckets.py`).
"""

from __future__ import annotations

from datetime import date

import duckdb

from demandprep.sqlfiles import run_sql

SALES = "choice_sales"
STATE = "choice_state_sales"
SCOPED = "choice_scoped_sales"


def stage_choice_sales(
    con: duckdb.DuckDBPyConnection, every_visit: bool, visits_from: date | None
) -> None:
    """Make `choice_sales`: read whole, or the kept lines with those from `visits_from` on."""
    if every_visit:
        drop_kept_sales(con)
        _read_lines(con, None)
        con.execute(f"alter table {SCOPED} rename to {SALES}")
        return
    con.execute(f"drop table if exists {SALES}")
    con.execute(f"alter table {STATE} rename to {SALES}")
    if visits_from is None:
        return  # no receipts file arrived or left: every line is kept
    con.execute(f"delete from {SALES} where day >= $first", {"first": visits_from})  # noqa: S608
    _read_lines(con, visits_from)
    con.execute(f"insert into {SALES} select * from {SCOPED}")  # noqa: S608
    con.execute(f"drop table {SCOPED}")


def _read_lines(con: duckdb.DuckDBPyConnection, first_day: date | None) -> None:
    # the category's lines from `first_day` on (None: every day) into choice_scoped_sales
    run_sql(con, "choices/020_choice_sales.sql", {"sales_from": first_day})


def drop_kept_sales(con: duckdb.DuckDBPyConnection) -> None:
    """No kept lines, nor a whole table a build that died left."""
    for table in (SALES, STATE, SCOPED):
        con.execute(f"drop table if exists {table}")
