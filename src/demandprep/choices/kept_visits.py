"""The card visits and occasions a build keeps from the last one, and those it makes again.

030 to 040 make the visits, their purchases and their occasions from `visits_from` on (all of
them in a full build) into `choice_scoped_*` tables; the stage then merges them with the kept
ones of earlier days into `choice_visits`, `choice_visit_purchases` and `choice_occasions`,
which the history, the choosers, the sets and the facts read whole. After a complete build the
three are renamed to `choice_state_*` (with the rest of the state, `scope.store_choice_state`),
and the next incremental build renames them back and deletes their rows from `visits_from` on.

The history of the kept visits (045) and the chooser numbers it is keyed by (044) are kept the
same way (`HISTORY_TABLES`), its rows from `visits_from` on deleted with the visits'.

A kept visit keeps its number (032): the new visits are numbered after the largest kept one, in
id order, and their ids start with later days, so numbers still order visits by id. The kept
visits hold no receipt number: nothing later needs it (035 joins only the visits it makes), and
without it no stored table joins a chooser to a till receipt.
"""

from __future__ import annotations

from datetime import date

import duckdb

from demandprep.choices import kept_sales

# the whole table a build reads -> the state table it is kept under between builds
KEPT_TABLES = {
    "choice_visits": "choice_state_visits",
    "choice_visit_purchases": "choice_state_visit_purchases",
    "choice_occasions": "choice_state_occasions",
}
VISIT_COLUMNS = "visit, visit_number, store, occasion_at, day, chooser, several_cards"
UNKEPT_VISIT_COLUMNS = ("visit_day", "receipt")
# the history of the kept visits and the chooser numbers it is keyed by (043 to 045): a build
# makes the history of the visits it makes again only
HISTORY_TABLES = {
    "choice_chooser_numbers": "choice_state_chooser_numbers",
    "choice_visit_history": "choice_state_visit_history",
}
# every table kept between builds but the category lines (kept_sales.py)
STORED_TABLES = {**KEPT_TABLES, **HISTORY_TABLES}
SCOPED_TABLES = (
    "choice_scoped_visits",
    "choice_scoped_visit_purchases",
    "choice_scoped_occasions",
)


def kept_tables_stored(con: duckdb.DuckDBPyConnection) -> bool:
    """True when the last build kept its visits, occasions and category lines."""
    names = {
        row[0]
        for row in con.execute(
            "select table_name from duckdb_tables() "
            "where database_name = current_database() and schema_name = 'main'"
        ).fetchall()
    }
    return all(state in names for state in (*STORED_TABLES.values(), kept_sales.STATE))


def restore_kept(con: duckdb.DuckDBPyConnection, visits_from: date | None) -> int:
    """Rename the kept tables back and delete their rows from `visits_from` on (None: keep
    all); returns the largest kept visit number (0 without one)."""
    for table, state in STORED_TABLES.items():
        con.execute(f"drop table if exists {table}")
        con.execute(f"alter table {state} rename to {table}")
    if visits_from is not None:
        for table in ("choice_visits", "choice_occasions", "choice_visit_history"):
            con.execute(f"delete from {table} where day >= $first", {"first": visits_from})  # noqa: S608
    last = con.execute("select coalesce(max(visit_number), 0) from choice_visits").fetchone()[0]
    # a purchase has no day: the visits after the kept ones have the larger numbers
    con.execute("delete from choice_visit_purchases where visit_number > $last", {"last": last})
    return last


def drop_kept(con: duckdb.DuckDBPyConnection) -> None:
    """A full build: no kept table, nor a whole one a build that died left."""
    for table, state in STORED_TABLES.items():
        con.execute(f"drop table if exists {table}")
        con.execute(f"drop table if exists {state}")


def merge_scoped(con: duckdb.DuckDBPyConnection, every_visit: bool) -> None:
    """Add the visits and occasions just made to the kept ones (a full build: they are all)."""
    if every_visit:
        for table, scoped in zip(KEPT_TABLES, SCOPED_TABLES, strict=True):
            con.execute(f"alter table {scoped} rename to {table}")
        # a dropped column costs no copy (a table made from the other columns cost 1.5 s per
        # 5M rows)
        for column in UNKEPT_VISIT_COLUMNS:
            con.execute(f"alter table choice_visits drop column {column}")
    else:
        visits = f"select {VISIT_COLUMNS} from choice_scoped_visits"  # noqa: S608
        con.execute(f"insert into choice_visits {visits}")
        for table, scoped in zip(KEPT_TABLES, SCOPED_TABLES, strict=True):
            if table != "choice_visits":
                con.execute(f"insert into {table} select * from {scoped}")  # noqa: S608
    for table in SCOPED_TABLES:
        con.execute(f"drop table if exists {table}")


def keep_for_next_build(con: duckdb.DuckDBPyConnection) -> None:
    """After a complete build, in its state transaction: the whole tables become the state."""
    for table, state in (*STORED_TABLES.items(), (kept_sales.SALES, kept_sales.STATE)):
        con.execute(f"drop table if exists {state}")
        con.execute(f"alter table {table} rename to {state}")
