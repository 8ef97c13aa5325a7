"""`instruments` and `share_table` kept per period, so that a night rewrites only the periods
whose shares or instrument values changed.

Both tables are assembled from per-period rows: `instruments` pivots the stored instrument
values of each product-market, and `share_table` joins them to the shares. A build lists the
periods it assembles in `assembly_periods`:

- the periods the market build recomputed (`market_slice_periods`), whose shares changed;
- the periods whose stored instrument values or flags the build changed
  (`076_iv_changed_periods.sql`, read before the merge: inputs computed again, periods that
  left, and values of the families computed for every period that came out different);
- every period when nothing is stored (`share_table_state`, or either table), when the market
  tables or the instrument values were recomputed for every period, when the config, this
  step's SQL or the two models changed, when the catalogue of iv_ columns changed, or when the
  stored tables were assembled from other instrument values or market tables than those this
  build merged into (a generation from `periods.py` and `market/slices.py` each).

`080` to `100` write the wide rows of those periods into `instruments_slice` and
`share_table_slice`, which replace the tables' rows of the same periods (every row when the
build assembles every period). Only the new rows meet the pandera models (the kept ones met
them when they were stored); each table's key is checked whole in SQL. The state is deleted
before the tables change and written after `share_table`, in the market stages' transaction:
a build that dies in between leaves no state, and the next one assembles every period. Every
reader of the two tables sorts, so a night writes the same bytes as a full build.
"""

from __future__ import annotations

import duckdb
import pandera.polars as pa

from demandprep import __version__
from demandprep.context import BuildContext
from demandprep.fingerprints import digest, source_of
from demandprep.instruments.periods import (
    is_full_build,
    merged_into_values,
    stored_values_generation,
)
from demandprep.market.slices import merged_into_generation, stored_generation, validate_merged
from demandprep.market.summaries import stored_table_exists
from demandprep.schemas.instruments import InstrumentsModel, ShareTableModel
from demandprep.sqlfiles import sql_text
from demandprep.validate import validate_table

ASSEMBLY_SQL = (
    "instruments/076_iv_changed_periods.sql",
    "instruments/080_iv_values_wide.sql",
    "instruments/081_iv_flags_wide.sql",
    "instruments/090_instruments.sql",
    "instruments/100_share_table.sql",
)

STATE_DDL = """
create table if not exists share_table_state (
    config_hash varchar not null,
    code_hash varchar not null,
    columns_hash varchar not null,
    instrument_generation varchar,
    market_generation varchar,
)
"""

# a row of either table belongs to the periods being assembled (instruments: by its market)
DELETE_INSTRUMENTS = """
delete from instruments
where not exists (select 1 from iv_products where iv_products.market = instruments.market)
    or exists (
        select 1 from iv_products semi join assembly_periods using (period_start)
        where iv_products.market = instruments.market
    )
"""
DELETE_SHARE_ROWS = """
delete from share_table
where period_start in (select period_start from assembly_periods)
    or period_start not in (select period_start from shares)
"""

NO_TABLES = "no instruments or share table are stored yet"
UPSTREAM_WHOLE = "the market tables or the instrument values were recomputed for every period"
FINGERPRINT_CHANGED = "the config or demandprep changed since the share table was stored"
COLUMNS_CHANGED = "the catalogue of iv_ columns changed"
OTHER_GENERATION = (
    "the stored share table was assembled from other instrument values or market tables"
)


def plan_assembly(ctx: BuildContext) -> None:
    """Write the periods this build assembles into `assembly_periods` (every one when the
    stored tables cannot be kept), record why in the facts, and delete the state until
    `share_table` is stored. Needs `instrument_columns` of this build."""
    con = ctx.con
    con.execute(STATE_DDL)
    reason = whole_assembly_reason(ctx)
    con.execute("delete from share_table_state")  # written again once share_table is stored
    if reason is None:
        con.execute(
            "create or replace temp table assembly_periods as "
            "select period_start from iv_changed_periods union "
            "select period_start from market_slice_periods"
        )
    else:
        con.execute(
            "create or replace temp table assembly_periods as "
            "select period_start from iv_products union select period_start from shares"
        )
    ctx.facts["share_table_scope"] = {
        "build_mode": "full" if reason else "incremental",
        "full_build_reason": reason,
        "periods_rebuilt": _assembly_periods(con),
    }


def whole_assembly_reason(ctx: BuildContext) -> str | None:
    """Why every period of `instruments` and `share_table` is assembled, or None."""
    con = ctx.con
    stored = con.execute(
        "select config_hash, code_hash, columns_hash, instrument_generation, market_generation "
        "from share_table_state"
    ).fetchall()
    if len(stored) != 1 or not all(
        stored_table_exists(con, table) for table in ("instruments", "share_table")
    ):
        return NO_TABLES
    market_merged_into = merged_into_generation(ctx)
    if is_full_build(ctx) or market_merged_into is None:
        return UPSTREAM_WHOLE
    config_hash, code_hash, columns_hash, instrument_generation, market_generation = stored[0]
    if (config_hash, code_hash) != (ctx.config.build_hash(), assembly_code_hash()):
        return FINGERPRINT_CHANGED
    if columns_hash != columns_digest(con):
        return COLUMNS_CHANGED
    values_merged_into = merged_into_values(ctx)
    if values_merged_into is None or (instrument_generation, market_generation) != (
        values_merged_into,
        market_merged_into,
    ):
        return OTHER_GENERATION
    return None


def assembly_code_hash() -> str:
    """A digest of the tool version, this step's SQL and the models of the two tables."""
    models = [source_of(InstrumentsModel), source_of(ShareTableModel)]
    return digest([__version__, *(sql_text(name) for name in ASSEMBLY_SQL), *models])


def columns_digest(con: duckdb.DuckDBPyConnection) -> str:
    """A digest of this build's catalogue of iv_ columns (`instrument_columns`)."""
    return digest(con.execute("select * from instrument_columns order by all").fetchall())


def is_whole_assembly(ctx: BuildContext) -> bool:
    """True when this build assembles every period of the two tables."""
    return ctx.facts["share_table_scope"]["build_mode"] == "full"


def merge_instruments(ctx: BuildContext) -> None:
    """Put `instruments_slice` in place of the assembled periods' rows of `instruments`."""
    _merge(ctx, "instruments", DELETE_INSTRUMENTS, InstrumentsModel)


def merge_share_table(ctx: BuildContext) -> None:
    """Put `share_table_slice` in place of the assembled periods' rows of `share_table`."""
    _merge(ctx, "share_table", DELETE_SHARE_ROWS, ShareTableModel)


def store_share_table_state(ctx: BuildContext) -> None:
    """Record what the stored tables were assembled from: config, code, iv_ columns, and the
    generations of the instrument values and market tables."""
    con = ctx.con
    con.execute("delete from share_table_state")
    con.execute(
        "insert into share_table_state (config_hash, code_hash, columns_hash, "
        "instrument_generation, market_generation) values (?, ?, ?, ?, ?)",
        [
            ctx.config.build_hash(),
            assembly_code_hash(),
            columns_digest(con),
            stored_values_generation(con),
            stored_generation(con),
        ],
    )


def _merge(
    ctx: BuildContext, table: str, delete_assembled: str, model: type[pa.DataFrameModel]
) -> None:
    con = ctx.con
    # the table names are ours, never the user's
    if is_whole_assembly(ctx):
        con.execute(f"drop table if exists {table}")
        con.execute(f"alter table {table}_slice rename to {table}")
        validate_table(con, table, model)
        return
    con.execute(delete_assembled)
    con.execute(f"insert into {table} by name from {table}_slice")  # noqa: S608
    validate_merged(ctx, table, f"{table}_slice", model)


def _assembly_periods(con: duckdb.DuckDBPyConnection) -> list[str]:
    rows = con.execute("select period_start from assembly_periods order by 1").fetchall()
    return [row[0].isoformat() for row in rows]
