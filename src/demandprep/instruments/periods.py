"""Instrument values kept per period, so that a night recomputes only the periods that changed.

- The family stages append this build's rows, each with its period, to `instrument_values` and
  `instrument_flags`; `store_instrument_values` merges them into the kept tables
  `iv_stored_values` / `iv_stored_flags`, which the instruments stage pivots.
- Which periods a build computes (`013_iv_build_periods.sql`): every period when nothing is
  stored yet or the fingerprint changed (config, reference files, tool and instrument SQL),
  else the periods whose inputs (`iv_products`, `iv_characteristic_values`) differ from the
  copy stored with the values. The inputs are compared rather than the market build's
  `periods_rebuilt`, because a change in one period (a product entering the universe) can move
  the product-markets of every period. When the market build kept every other period's rows of
  the tables the copy was read from (`stored_inputs_hold`: the generations match), only its
  periods are read and compared, and the copy stands for the others.
- Per period: Hausman means (other markets of the same period), characteristic sums and counts
  and the squared distances (own market). The near-rival count also in the periods where a
  moved spread over all product-markets changes a count (`near_periods.py`, which keeps the
  rival gaps in `iv_stored_gaps`). Every period: the cost shifters (cheap; their windows come
  from the whole list of periods).
  The merge replaces an iv_ column's rows of each period the build computed and changed
  (`076_iv_changed_periods.sql`: a period whose fresh rows all equal the stored ones, bit for
  bit, keeps them).
- The merge, the input copy (rewritten for the computed periods and those that left only)
  and the state are written in one transaction: a crash leaves the stored values as they
  were, and the next build recomputes from that record.
- Each stored state has a new generation and, when the build merged into kept values, the
  generation it merged into; before an incremental merge, `076_iv_changed_periods.sql` lists
  the periods whose stored rows it changes. The tables assembled from the values keep the
  other periods' rows when they were assembled from the generation merged into
  (`kept_assembly.py`).

Values of a period depend only on that period's inputs (and on the spread, compared bit for
bit), and every later step pivots and sorts, so the Parquet files equal a full build's.
"""

from __future__ import annotations

import uuid

import duckdb

from demandprep import __version__
from demandprep.context import BuildContext
from demandprep.fingerprints import current_reference_files, digest
from demandprep.market.inputs import has_ledger
from demandprep.market.slices import merged_into_generation, stored_generation
from demandprep.sqlfiles import run_sql, sql_text

# the steps whose text decides what a stored value means
INSTRUMENT_SQL = (
    "instruments/010_iv_products.sql",
    "instruments/011_instrument_values.sql",
    "instruments/012_instrument_flags.sql",
    "instruments/013_iv_build_periods.sql",
    "instruments/020_iv_characteristic_values.sql",
    "instruments/030_iv_market_groups.sql",
    "instruments/040_iv_hausman.sql",
    "instruments/041_instrument_values_hausman.sql",
    "instruments/042_instrument_flags_hausman.sql",
    "instruments/050_instrument_values_characteristic_sums.sql",
    "instruments/051_instrument_values_product_counts.sql",
    "instruments/057_iv_rival_gaps.sql",
    "instruments/058_iv_spreads.sql",
    "instruments/059_iv_near_periods.sql",
    "instruments/060_instrument_values_differentiation.sql",
    "instruments/070_instrument_values_cost_shifters.sql",
    "instruments/076_iv_changed_periods.sql",
)

STATE_DDL = """
create table if not exists instrument_state (
    config_hash varchar not null,
    references_hash varchar not null,
    code_hash varchar not null,
);
alter table instrument_state add column if not exists market_generation varchar;
alter table instrument_state add column if not exists generation varchar;
alter table instrument_state add column if not exists merged_into varchar;
create table if not exists iv_stored_products (
    market varchar not null,
    geography varchar,
    period_start date not null,
    product varchar not null,
    firm varchar,
    price double,
);
create table if not exists iv_stored_characteristics (
    market varchar not null,
    product varchar not null,
    period_start date not null,
    firm varchar,
    characteristic varchar not null,
    value double,
);
create table if not exists iv_stored_spreads (
    characteristic varchar not null,
    spread double,
);
create table if not exists iv_stored_gaps (
    period_start date not null,
    characteristic varchar not null,
    gap double,
);
create table if not exists iv_stored_values (
    market varchar not null,
    product varchar not null,
    period_start date not null,
    instrument varchar not null,
    family varchar not null,
    source varchar,
    value double,
);
create table if not exists iv_stored_flags (
    market varchar not null,
    product varchar not null,
    period_start date not null,
    flag varchar not null,
    family varchar not null,
    source varchar,
    value boolean not null,
);
"""

# what a build without characteristics compares (the family SQL never reads it then)
NO_CHARACTERISTICS_DDL = """
create or replace table iv_characteristic_values (
    market varchar,
    product varchar,
    period_start date,
    firm varchar,
    characteristic varchar,
    value double,
)
"""

NO_VALUES = "no instrument values are stored yet"
NO_LEDGER = "the warehouse has no ledger to tell whether a reference file changed"
CODE_CHANGED = "demandprep or its SQL changed since the instrument values were stored"
CONFIG_CHANGED = "the config changed since the instrument values were stored"
REFERENCES_CHANGED = "a reference file changed since the instrument values were stored"


def create_empty_characteristics(con: duckdb.DuckDBPyConnection) -> None:
    """An empty `iv_characteristic_values` for a config whose families use no characteristic."""
    con.execute(NO_CHARACTERISTICS_DDL)


def instrument_build_reason(ctx: BuildContext) -> str | None:
    """Why every period's instruments must be computed (None: changed periods suffice); makes
    the state tables of a warehouse that has none."""
    ctx.con.execute(STATE_DDL)
    # the input SQL names the market build's periods, which a build that ran no market stage
    # on this connection does not have: none, and nothing is kept (stored_inputs_hold)
    ctx.con.execute("create temp table if not exists market_slice_periods (period_start date)")
    return full_build_reason(ctx.con, current_fingerprint(ctx))


def stored_inputs_hold(ctx: BuildContext, reason: str | None) -> bool:
    """True when the stored inputs equal this build's outside the market build's recomputed
    periods (`market_slice_periods`): the values are incremental, and the market build kept
    every other period's rows of the very tables the copies were stored from (the generation
    it merged into is the one stored with the values, `market/slices.py`)."""
    if reason is not None:
        return False
    merged_into = merged_into_generation(ctx)
    stored = ctx.con.execute("select market_generation from instrument_state").fetchone()
    return merged_into is not None and stored is not None and stored[0] == merged_into


def plan_instrument_periods(ctx: BuildContext, reason: str | None, keep_stored: bool) -> None:
    """Write the periods to compute into `iv_build_periods` (every one when `reason`)."""
    con = ctx.con
    run_sql(
        con,
        "instruments/013_iv_build_periods.sql",
        {"every_period": reason is not None, "keep_stored": keep_stored},
    )
    ctx.facts["instrument_scope"] = {
        "build_mode": "full" if reason is not None else "incremental",
        "periods_rebuilt": _build_periods(con),
        "full_build_reason": reason,
        "every_period": [],
        "near_counts_recounted": [],
        "inputs_read": "market build's periods" if keep_stored else "every period",
    }


def current_fingerprint(ctx: BuildContext) -> tuple[str, str, str]:
    """(config, reference files, tool and SQL) hashes; references '' without a ledger."""
    references = ""
    if has_ledger(ctx.con):
        references = digest(current_reference_files(ctx.con))
    code = digest([__version__, *(sql_text(name) for name in INSTRUMENT_SQL)])
    return ctx.config.build_hash(), references, code


def full_build_reason(
    con: duckdb.DuckDBPyConnection, fingerprint: tuple[str, str, str]
) -> str | None:
    """Why every period's instruments must be computed, or None when changed periods suffice."""
    stored = con.execute(
        "select config_hash, references_hash, code_hash from instrument_state"
    ).fetchall()
    if len(stored) != 1:
        return NO_VALUES
    config_hash, references_hash, code_hash = fingerprint
    if not references_hash:
        return NO_LEDGER
    if stored[0][2] != code_hash:
        return CODE_CHANGED
    if stored[0][0] != config_hash:
        return CONFIG_CHANGED
    if stored[0][1] != references_hash:
        return REFERENCES_CHANGED
    return None


def is_full_build(ctx: BuildContext) -> bool:
    """True when this build computes every period's instruments."""
    return ctx.facts["instrument_scope"]["build_mode"] == "full"


def note_every_period(ctx: BuildContext, family: str) -> None:
    """Record that `family` was computed for every period in this build."""
    families = ctx.facts["instrument_scope"]["every_period"]
    families.append(family)
    families.sort()


def store_instrument_values(ctx: BuildContext) -> None:
    """Merge this build's rows into the stored values and store their inputs, atomically."""
    con = ctx.con
    full = is_full_build(ctx)
    with ctx.atomic():
        if not full:
            run_sql(con, "instruments/076_iv_changed_periods.sql")
        for stored, fresh, column in (
            ("iv_stored_values", "instrument_values", "instrument"),
            ("iv_stored_flags", "instrument_flags", "flag"),
        ):
            _replace_rows(con, stored, fresh, column, full)
        _store_inputs(con, ctx.config.instruments.differentiation)
        merged_into = None if full else stored_values_generation(con)
        store_instrument_state(con, current_fingerprint(ctx), stored_generation(con), merged_into)


def store_instrument_state(
    con: duckdb.DuckDBPyConnection,
    fingerprint: tuple[str, str, str],
    market_generation: str | None,
    merged_into: str | None,
) -> None:
    """Record the fingerprint the stored values were computed under, the generation of the
    market tables their inputs were read from, a new generation of the values and the one
    this build merged into (None: every period was computed)."""
    con.execute("delete from instrument_state")
    con.execute(
        "insert into instrument_state (config_hash, references_hash, code_hash, "
        "market_generation, generation, merged_into) values (?, ?, ?, ?, ?, ?)",
        [*fingerprint, market_generation, uuid.uuid4().hex, merged_into],
    )


def stored_values_generation(con: duckdb.DuckDBPyConnection) -> str | None:
    """The generation of the stored instrument values (None before the first, or when stored
    by a version that kept none)."""
    row = con.execute("select generation from instrument_state").fetchone()
    return row[0] if row else None


def merged_into_values(ctx: BuildContext) -> str | None:
    """The generation of the values this build merged its periods into; None when it computed
    every period."""
    if is_full_build(ctx):
        return None
    row = ctx.con.execute("select merged_into from instrument_state").fetchone()
    return row[0] if row else None


def _replace_rows(
    con: duckdb.DuckDBPyConnection, stored: str, fresh: str, column: str, full: bool
) -> None:
    # the names are ours, never the user's; an iv_ column's rows of a period go as a whole
    if full:
        con.execute(f"delete from {stored}")  # noqa: S608
        con.execute(f"insert into {stored} by name from {fresh}")  # noqa: S608
        return
    # a period outside iv_changed_periods has every fresh row equal to its stored twin, bit
    # for bit (076): only the changed periods' rows are written
    con.execute(
        f"delete from {stored} where ({stored}.period_start in "  # noqa: S608
        "(select period_start from iv_changed_periods) "
        f"and exists (select 1 from {fresh} where {fresh}.{column} = {stored}.{column} "
        f"and {fresh}.period_start = {stored}.period_start)) "
        f"or {stored}.period_start not in (select period_start from iv_products)"
    )
    con.execute(
        f"insert into {stored} by name from {fresh} where period_start in "  # noqa: S608
        "(select period_start from iv_changed_periods)"
    )


def _store_inputs(con: duckdb.DuckDBPyConnection, differentiation: list[str]) -> None:
    # a period outside iv_build_periods equals its stored copy (013), so only the computed
    # periods and those that left are written: a night rewrites one period, not every one
    copies = [
        ("iv_stored_products", "iv_products"),
        ("iv_stored_characteristics", "iv_characteristic_values"),
    ]
    if differentiation:
        copies.append(("iv_stored_gaps", "iv_rival_gaps"))
    else:
        con.execute("delete from iv_stored_gaps")
    for stored, current in copies:
        con.execute(
            f"delete from {stored} where period_start in "  # noqa: S608
            "(select period_start from iv_build_periods) "
            "or period_start not in (select period_start from iv_products)"
        )
        con.execute(
            f"insert into {stored} by name from {current} where period_start in "  # noqa: S608
            "(select period_start from iv_build_periods)"
        )
    con.execute("delete from iv_stored_spreads")
    if differentiation:
        con.execute("insert into iv_stored_spreads by name from iv_spreads")


def _build_periods(con: duckdb.DuckDBPyConnection) -> list[str]:
    rows = con.execute("select period_start from iv_build_periods order by 1").fetchall()
    return [row[0].isoformat() for row in rows]
