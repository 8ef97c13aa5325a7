"""Per-market tables kept between builds, so that a night rewrites only its periods' rows.

After the period summaries (summaries.py), every market table up to the share table holds rows
of one market (geography x period) each, computed from that market's summary rows only, except
for three inputs that span every market: the product universe (which products are kept), the
shelf availability (reference files and the universe) and the peak volume of each geography
(`peak_multiple` sizes). So when the summaries were recomputed for some periods only:

- each SLICED table's SQL writes `<table>_slice` for the periods in `market_slice_periods`
  (the summaries' recomputed periods), and `merge_slice` replaces those periods' rows of the
  stored table (deleted, then inserted);
- the shelf availability is kept as stored while the tables are sliced (after the universe,
  so its kept products are known to be the same);
- the tables are rebuilt for every period (`market_slice_periods` holds every period the
  calendar or a summary knows, and the slice replaces the table) when the summaries were
  rebuilt whole, when no state is stored or its fingerprint (config, reference files, this
  tool's SQL and models) changed, in a partitioned build's reduce, and, from the first table
  that reads them on, when the universe's kept products or a geography's peak volume differ
  from those the stored rows were made with.

Only the recomputed rows meet the pandera model (the kept ones met it when they were stored);
each table's key is checked whole in SQL, and the checks that warn or count read the whole
table. The state is deleted when a build recomputes every period, and marked as merging (no
generation) when it slices; it is written once the last sliced table is stored, in the market
stages' transaction: a build that dies in between leaves no usable state, and the next one
rebuilds every period. Each stored state has a new generation and, when the build sliced
through the share table, the generation it merged into, so the instruments know whether the
copies of market_products they keep are of the rows this build kept. Every later step sums in
a fixed order, so a night writes the same bytes as a full build.
"""

from __future__ import annotations

import uuid

import duckdb
import pandera.polars as pa

from demandprep import __version__
from demandprep.context import BuildContext
from demandprep.fingerprints import digest, source_of
from demandprep.market.summaries import (
    current_fingerprint,
    require_unique_key,
    stored_table_exists,
)
from demandprep.schemas import market as market_schemas
from demandprep.sqlfiles import run_sql, sql_text
from demandprep.validate import validate_table

# in build order; each SQL file writes <table>_slice for the periods in market_slice_periods
SLICED = (
    "market_product_sales",
    "market_zero_sales",
    "market_products",
    "market_sizes",
    "markets",
    "shares",
)
SLICED_SQL = (
    "market/070_market_product_sales.sql",
    "market/090_market_availability.sql",
    "market/095_market_zero_sales.sql",
    "market/100_market_products.sql",
    "market/105_market_peak_volumes.sql",
    "market/106_moved_peak_volumes.sql",
    "market/110_market_sizes.sql",
    "market/120_markets.sql",
    "market/130_shares.sql",
)

# generation: a new id each time the tables are stored; merged_into: the generation whose
# tables this build's slices were merged into (null when every period was recomputed), so a
# later step that keeps copies of these tables' rows knows whether its copies are of the rows
# this build kept (`instruments/periods.py`); a row whose generation is null is a build's that
# is still merging (or died doing so)
STATE_DDL = """
create table if not exists market_slice_state (
    config_hash varchar not null,
    references_hash varchar not null,
    code_hash varchar not null,
);
alter table market_slice_state add column if not exists generation varchar;
alter table market_slice_state add column if not exists merged_into varchar;
"""

SUMMARIES_WHOLE = "the period summaries were rebuilt whole"
NO_STATE = "no per-market tables are stored yet"
FINGERPRINT_CHANGED = (
    "the config, a reference file or demandprep changed since the per-market tables were stored"
)
PARTITIONED = "a partitioned build's reduce rebuilds every per-market table"
UNIVERSE_CHANGED = "the product universe's kept products changed"
PEAKS_MOVED = "a geography's peak volume moved (peak_multiple sizes)"


def plan_slices(ctx: BuildContext) -> None:
    """Decide whether the per-market tables are recomputed for the summaries' periods only,
    and write those periods (or every period) into `market_slice_periods`."""
    con = ctx.con
    con.execute(STATE_DDL)
    reason = whole_build_reason(ctx)
    if reason is None:
        # written again once every table is stored; until then it says what is being merged
        con.execute("update market_slice_state set merged_into = generation, generation = null")
        periods = ctx.facts["build_scope"]["periods_rebuilt"]
        con.execute(
            "create or replace temp table market_slice_periods as "
            "select unnest($periods::date[]) as period_start",
            {"periods": periods},
        )
        ctx.facts["market_tables"] = {"build_mode": "incremental", "full_build_reason": None}
    else:
        con.execute("delete from market_slice_state")  # written again once every table is stored
        every_period_from_here(ctx, reason)


def whole_build_reason(ctx: BuildContext) -> str | None:
    """Why every period of the per-market tables is recomputed, or None."""
    con = ctx.con
    if ctx.facts.get("build_scope", {}).get("build_mode") != "incremental":
        return SUMMARIES_WHOLE
    stored = con.execute(
        "select config_hash, references_hash, code_hash from market_slice_state "
        "where generation is not null"
    ).fetchall()
    if len(stored) != 1 or not all(stored_table_exists(con, table) for table in SLICED):
        return NO_STATE
    if tuple(stored[0]) != slice_fingerprint(con, ctx):
        return FINGERPRINT_CHANGED
    return None


def every_period_from_here(ctx: BuildContext, reason: str) -> None:
    """From the next sliced table on, recompute every period."""
    ctx.facts["market_tables"] = {"build_mode": "full", "full_build_reason": reason}


def prepare_slice(ctx: BuildContext) -> None:
    """Before a sliced table's SQL: plan a build that skipped `plan_slices` (a partitioned
    reduce recomputes every period), and when every period is recomputed, list them all."""
    if "market_tables" not in ctx.facts:
        ctx.con.execute(STATE_DDL)
        ctx.con.execute("delete from market_slice_state")
        every_period_from_here(ctx, PARTITIONED)
    if is_whole(ctx):
        # every period the calendar or a summary knows: each sliced row comes from one of them
        ctx.con.execute(
            "create or replace temp table market_slice_periods as "
            "select period_start from market_calendar union "
            "select period_start from market_store_visits union "
            "select period_start from market_sku_sales"
        )


def is_whole(ctx: BuildContext) -> bool:
    """True when the sliced tables are recomputed for every period in this build."""
    return ctx.facts["market_tables"]["build_mode"] == "full"


def slice_fingerprint(con: duckdb.DuckDBPyConnection, ctx: BuildContext) -> tuple[str, str, str]:
    """(config, reference files, tool with the sliced tables' SQL and models) hashes."""
    summaries = current_fingerprint(con, ctx.config)
    models = [source_of(market_schemas.MARKET_MODELS[name]) for name in SLICED]
    code = digest([__version__, *(sql_text(name) for name in SLICED_SQL), *models])
    return summaries.config_hash, summaries.references_hash, code


def kept_products(con: duckdb.DuckDBPyConnection) -> list[tuple]:
    """(product, kept) of the stored universe, in product order; empty before the first."""
    if not stored_table_exists(con, "product_universe"):
        return []
    return con.execute("select product, kept from product_universe order by product").fetchall()


def note_universe(ctx: BuildContext, before: list[tuple]) -> None:
    """After the universe is rebuilt: kept products other than `before` (the stored ones)
    change rows of every period, so the tables from here on are recomputed whole."""
    if not is_whole(ctx) and kept_products(ctx.con) != before:
        every_period_from_here(ctx, UNIVERSE_CHANGED)


def plan_peak_volumes(ctx: BuildContext) -> None:
    """Write each geography's peak volume (`market_peak_volumes`, read by the sizes); when a
    kept period's stored peak_multiple size no longer matches it, recompute every period."""
    run_sql(ctx.con, "market/105_market_peak_volumes.sql")
    if is_whole(ctx):
        return
    moved = run_sql(ctx.con, "market/106_moved_peak_volumes.sql").fetchone()[0]
    if moved:
        every_period_from_here(ctx, PEAKS_MOVED)


def availability_holds(ctx: BuildContext) -> bool:
    """True when the stored shelf availability still holds: it reads only reference files, the
    config and the universe's kept products, and a build that slices found none changed."""
    return not is_whole(ctx) and stored_table_exists(ctx.con, "market_availability")


def merge_slice(ctx: BuildContext, table: str) -> str:
    """Put `<table>_slice` in place of its periods' rows of `table` (of the whole table when
    every period was recomputed); returns the table holding the recomputed rows."""
    con = ctx.con
    # the table names are ours (SLICED), never the user's
    if is_whole(ctx):
        con.execute(f"drop table if exists {table}")
        con.execute(f"alter table {table}_slice rename to {table}")
        return table
    con.execute(
        f"delete from {table} where period_start in "  # noqa: S608
        "(select period_start from market_slice_periods)"
    )
    con.execute(f"insert into {table} by name from {table}_slice")  # noqa: S608
    return f"{table}_slice"


def validate_merged(
    ctx: BuildContext, table: str, recomputed: str, model: type[pa.DataFrameModel]
) -> int:
    """Validate the recomputed rows, drop the slice, check the whole table's key; returns the
    table's rows."""
    con = ctx.con
    validate_table(con, recomputed, model, shown_as=table)
    if recomputed != table:
        require_unique_key(con, table, model, recomputed)
        con.execute(f"drop table {recomputed}")
    return con.execute(f"select count(*) from {table}").fetchone()[0]  # noqa: S608


def store_slice_state(ctx: BuildContext) -> None:
    """Record the fingerprint the stored per-market tables were made with, a new generation,
    and the one this build's slices were merged into."""
    con = ctx.con
    merged_into = None
    if not is_whole(ctx):
        row = con.execute(
            "select merged_into from market_slice_state where generation is null"
        ).fetchone()
        merged_into = row[0] if row else None
    con.execute("delete from market_slice_state")
    con.execute(
        "insert into market_slice_state "
        "(config_hash, references_hash, code_hash, generation, merged_into) "
        "values (?, ?, ?, ?, ?)",
        [*slice_fingerprint(con, ctx), uuid.uuid4().hex, merged_into],
    )


def stored_generation(con: duckdb.DuckDBPyConnection) -> str | None:
    """The generation of the stored per-market tables; None while a build merges into them or
    when none is recorded."""
    con.execute(STATE_DDL)
    row = con.execute(
        "select generation from market_slice_state where generation is not null"
    ).fetchone()
    return row[0] if row else None


def merged_into_generation(ctx: BuildContext) -> str | None:
    """The generation of the tables this build merged its slices into, when it kept the rows
    of every other period through the share table; None when it recomputed every period."""
    if ctx.facts.get("market_tables", {}).get("build_mode") != "incremental":
        return None
    row = ctx.con.execute(
        "select merged_into from market_slice_state where generation is not null"
    ).fetchone()
    return row[0] if row else None
