"""Incremental choice builds: which occasions a build recomputes, and what it keeps for the next.

- Card visits and their occasions are made from the receipt lines only from `visits_from` on
  (028, planned in the inputs stage once the alternative map is made: the first day of the
  earliest market period a receipts file that arrived or left touches); the earlier ones, and
  the category's sale lines of earlier days, are kept from the last build (`kept_visits.py`,
  `kept_sales.py`). The history and the choosers are computed whole from them (the history
  runs across periods). Each occasion's choice set with prices and attributes (062) and its
  rows in `choices` (090) are made only for the occasions from `rebuilt_from` on (056: that
  day, or an earlier one where a store-day's market changed). `choices` keeps the rows of the
  earlier occasions: occasion ids start with their day (030), so the build deletes the rows
  from that day on and appends the new ones, and the table stays in (occasion, alternative)
  order.
- A full build when nothing is stored yet, or when what gives a row its meaning changed: the
  config, a reference file, this tool and its SQL, the pseudonym key, the alternatives (the
  product universe and the SKU map, which move with every market), or when receipt ids let a
  visit span days (markets.receipt_ids_unique_per other than store_day).
- The state (fingerprint, the receipts files the rows come from with their first sale day, the
  store-day markets, and the visits and occasions) is forgotten once the scope is planned,
  before any kept table is touched, and written, in one transaction, after the new rows of
  `choices` passed their checks: a build that dies in between leaves no state, and the next
  one is full.

A kept row equals what a full build would write: a choice set reads earlier days only, a price
its store's (or region's) period or earlier days, a history earlier occasions, and nothing
reads a later day; the checks of `choices` ran on the kept rows when they were written.
"""

from __future__ import annotations

from dataclasses import astuple, dataclass
from datetime import date
from importlib import resources
from typing import Any

import duckdb

from demandprep import __version__
from demandprep.choices import kept_sales
from demandprep.choices.kept_visits import STORED_TABLES, keep_for_next_build, kept_tables_stored
from demandprep.choices.pseudonyms import key_fingerprint, pseudonym_key
from demandprep.choices.settings import ChoiceSettings, table_columns
from demandprep.context import BuildContext
from demandprep.fingerprints import current_reference_files, digest, source_of
from demandprep.market.inputs import has_ledger
from demandprep.schemas.choices import Choices, Choosers
from demandprep.sqlfiles import run_sql, sql_text

STATE_TABLES = ("choice_state", "choice_state_files", "choice_state_store_day_markets")

STATE_DDL = """
create table if not exists choice_state (
    config_hash varchar not null,
    references_hash varchar not null,
    code_hash varchar not null,
    key_fingerprint varchar not null,
    alternatives_hash varchar not null,
);
create table if not exists choice_state_files (
    file_id varchar not null,
    sha256 varchar not null,
    first_day date,
);
create table if not exists choice_state_store_day_markets (
    store varchar,
    day date,
    market varchar,
);
"""

NO_STATE = "no choice rows are stored yet"
NO_LEDGER = "the warehouse has no ledger to tell which receipts files changed"
CODE_CHANGED = "demandprep or its SQL changed since the choice rows were stored"
CONFIG_CHANGED = "the config changed since the choice rows were stored"
REFERENCES_CHANGED = "a reference file changed since the choice rows were stored"
KEY_CHANGED = "the pseudonym key changed since the choice rows were stored"
ALTERNATIVES_CHANGED = (
    "the alternatives (product universe, SKU map) changed since the choice rows were stored"
)

EVERY_VISIT = """
create or replace table choice_visit_scope as
select true as every_visit, cast(null as date) as visits_from, cast($reason as varchar)
    as full_build_reason
"""

EVERY_OCCASION = """
create or replace table choice_build_scope as
select true as every_occasion, cast(null as date) as rebuilt_from
"""

ALTERNATIVES_DIGEST = """
select coalesce(md5(string_agg(
    concat_ws(chr(31), sku, product, kept, alternative), chr(30) order by sku, product
)), '')
from choice_alternative_map
"""


@dataclass(frozen=True)
class ChoiceFingerprint:
    """What gives the stored choice rows their meaning, compared field by field."""

    config_hash: str
    references_hash: str
    code_hash: str
    key_fingerprint: str
    alternatives_hash: str


def code_digest() -> str:
    """This tool's version, every choice SQL file, the stage code and the two models."""
    from demandprep.choices import build  # the stage code, which imports this module

    folder = resources.files("demandprep.sql").joinpath("choices")
    names = sorted(entry.name for entry in folder.iterdir() if entry.name.endswith(".sql"))
    sources = [source_of(item) for item in (build, Choices, Choosers)]
    return digest([__version__, *(sql_text(f"choices/{name}") for name in names), *sources])


def current_fingerprint(ctx: BuildContext) -> ChoiceFingerprint:
    """The fingerprint of this build (after the choice inputs: it reads the alternative map)."""
    con = ctx.con
    key = pseudonym_key(ctx.config.choices.pseudonym_key_env)
    return ChoiceFingerprint(
        config_hash=ctx.config.build_hash(),
        references_hash=digest(current_reference_files(con)),
        code_hash=code_digest(),
        key_fingerprint=key_fingerprint(key),
        alternatives_hash=con.execute(ALTERNATIVES_DIGEST).fetchone()[0],
    )


def full_build_reason(ctx: BuildContext) -> str | None:
    """Why every occasion's rows must be made again, or None when the stored ones may stay."""
    con = ctx.con
    scope = ctx.config.markets.receipt_ids_unique_per
    if scope != "store_day":
        return f"markets.receipt_ids_unique_per = {scope!r} lets a visit span days"
    if not has_ledger(con):
        return NO_LEDGER
    stored = con.execute(f"select * from {STATE_TABLES[0]}").fetchall()  # noqa: S608
    if len(stored) != 1 or table_columns(con, "choices") is None:
        return NO_STATE
    before, now = ChoiceFingerprint(*stored[0]), current_fingerprint(ctx)
    for field, reason in (
        ("code_hash", CODE_CHANGED),
        ("config_hash", CONFIG_CHANGED),
        ("references_hash", REFERENCES_CHANGED),
        ("key_fingerprint", KEY_CHANGED),
        ("alternatives_hash", ALTERNATIVES_CHANGED),
    ):
        if getattr(before, field) != getattr(now, field):
            return reason
    undated = con.execute(
        "select min(file_id) from ledger where source = 'receipts' and status = 'current' "
        "and rows_accepted > 0 and first_sold_at is null"
    ).fetchone()[0]
    if undated is not None:
        return f"the ledger gives no first sale time for receipts file {undated}"
    return None


def plan_visit_scope(ctx: BuildContext, settings: ChoiceSettings) -> None:
    """Decide full or incremental and write `choice_visit_scope` (028), then forget the state:
    from here on a build that dies leaves a full build to the next one.

    Runs in the inputs stage once the alternative map is made (the fingerprint reads it), before
    the category's lines are read (`kept_sales.py`)."""
    con = ctx.con
    con.execute(STATE_DDL)
    reason = full_build_reason(ctx)
    if reason is None and not kept_tables_stored(con):
        reason = NO_STATE
    if reason is None:
        run_sql(con, "choices/028_choice_visit_scope.sql", settings.params())
    else:
        con.execute(EVERY_VISIT, {"reason": reason})
    forget_choice_state(con)


def visit_scope_params(con: duckdb.DuckDBPyConnection) -> dict[str, Any]:
    """`every_visit`, `visits_from` (null: no visit made again) and the full build's reason."""
    every_visit, visits_from, reason = con.execute(
        "select every_visit, visits_from, full_build_reason from choice_visit_scope"
    ).fetchone()
    return {"every_visit": every_visit, "visits_from": visits_from, "full_build_reason": reason}


def plan_choice_scope(ctx: BuildContext, settings: ChoiceSettings) -> None:
    """Write `choice_build_scope` (056; full when the visits were) and record the facts.

    Runs after the store-day markets (079), which it compares with the stored ones.
    """
    con = ctx.con
    reason = visit_scope_params(con)["full_build_reason"]
    if reason is None:
        run_sql(con, "choices/056_choice_build_scope.sql", settings.params())
    else:
        con.execute(EVERY_OCCASION)
    rebuilt_from = scope_params(con)["rebuilt_from"]
    ctx.facts["choice_scope"] = {
        "build_mode": "full" if reason is not None else "incremental",
        "first_day_rebuilt": rebuilt_from.isoformat() if rebuilt_from is not None else None,
        "full_build_reason": reason,
    }


def scope_params(con: duckdb.DuckDBPyConnection) -> dict[str, Any]:
    """`$every_occasion` and `$rebuilt_from` (null: none) of this build, from 056's row."""
    every_occasion, rebuilt_from = con.execute(
        "select every_occasion, rebuilt_from from choice_build_scope"
    ).fetchone()
    return {"every_occasion": every_occasion, "rebuilt_from": rebuilt_from}


def first_rebuilt_id(rebuilt_from: date) -> str:
    """The smallest occasion id of a day or later: ids start with their day (030)."""
    return rebuilt_from.isoformat()


def forget_choice_state(con: duckdb.DuckDBPyConnection) -> None:
    """Before `choices` changes: without a state the next build is full."""
    con.execute(STATE_DDL)
    con.execute(f"delete from {STATE_TABLES[0]}")  # noqa: S608


def store_choice_state(ctx: BuildContext) -> None:
    """After `choices` is complete and checked: its fingerprint and inputs, in one transaction."""
    con = ctx.con
    if not has_ledger(con):
        return  # nothing tells the next build which files changed: it is full (NO_LEDGER)
    fingerprint = current_fingerprint(ctx)
    with ctx.atomic():
        con.execute(STATE_DDL)
        for table in STATE_TABLES:
            con.execute(f"delete from {table}")  # noqa: S608
        con.execute("insert into choice_state values (?, ?, ?, ?, ?)", list(astuple(fingerprint)))
        con.execute(
            "insert into choice_state_files select file_id, sha256, cast(first_sold_at as date) "
            "from ledger where source = 'receipts' and status = 'current' and rows_accepted > 0"
        )
        con.execute(
            "insert into choice_state_store_day_markets "
            "select store, day, market from choice_store_day_markets"
        )
        keep_for_next_build(con)


def drop_choice_state(con: duckdb.DuckDBPyConnection) -> None:
    """Drop every state table (choices turned off, or a build that never keeps rows)."""
    for table in (*STATE_TABLES, *STORED_TABLES.values(), kept_sales.STATE):
        con.execute(f"drop table if exists {table}")
