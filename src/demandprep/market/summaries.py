"""Period summaries kept between builds, so that a night recomputes only the periods it touches.

The market build reads raw lines twice: visits per store and period (050) and demand per
geography, period and SKU (060). Both tables stay in the warehouse between builds as period
summaries; the later steps read them, and they are small (the per-market tables from 070 on
keep their rows between builds as well: market/slices.py).

- Each summary keeps its state: a fingerprint of what gives its rows their meaning (the
  config, the reference files, the tool and its SQL) and the receipts files its rows come from,
  with the first and last period of each file's lines (`market_summary_files`).
- A build diffs the ledger's current receipts files against that record. Files that arrived and
  files that left (superseded by a correction, withdrawn) give ranges of periods
  (`045_market_build_ranges.sql`); the scans recompute only those periods into `<summary>_slice`.
- A summary with no state, another fingerprint, or receipt ids that let a visit span days
  (markets.receipt_ids_unique_per other than store_day) is rebuilt whole: same SQL, every period.
- `store_summary` validates the slice (the kept rows passed the same model when stored),
  replaces the slice's periods, checks the whole summary's key in SQL and writes the state in
  one transaction, so a crash leaves the summary and its state as they were, and the next
  build recomputes the rest.

Rows are merged as sets; every later step sums in a fixed order, so an incremental build writes
the same bytes as a full one.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, time, timedelta

import duckdb
import pandera.polars as pa

from demandprep import __version__
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.fingerprints import digest, source_of
from demandprep.market.inputs import has_ledger
from demandprep.schemas import market as market_schemas
from demandprep.sqlfiles import quote_identifier, run_sql, sql_text
from demandprep.validate import validate_table

SUMMARIES = ("market_store_visits", "market_sku_sales")

# the steps whose text decides what a summary row means
SUMMARY_SQL = (
    "market/010_market_calendar.sql",
    "market/020_market_skus.sql",
    "market/040_market_store_geographies.sql",
    "market/042_market_file_periods.sql",
    "market/045_market_build_ranges.sql",
    "market/050_market_store_visits_slice.sql",
    "market/060_market_sku_sales_slice.sql",
)

STATE_DDL = """
create table if not exists market_summary_state (
    summary varchar not null,
    config_hash varchar not null,
    references_hash varchar not null,
    code_hash varchar not null,
);
create table if not exists market_summary_files (
    summary varchar not null,
    file_id varchar not null,
    sha256 varchar not null,
    first_period date,
    last_period date,
);
create or replace table market_summary_modes (
    summary varchar not null,
    full_build boolean not null,
);
"""

NO_SUMMARIES = "no period summaries are stored yet"
NO_LEDGER = "the warehouse has no ledger to tell which receipts files changed"
CODE_CHANGED = "demandprep or its SQL changed since the summaries were built"
CONFIG_CHANGED = "the config changed since the summaries were built"
REFERENCES_CHANGED = (
    "a reference file (catalogue, stores, shelf prices, ...) changed since the summaries were built"
)


@dataclass(frozen=True)
class Fingerprint:
    """What gives a summary's rows their meaning, as three hashes (compared one by one)."""

    config_hash: str
    references_hash: str
    code_hash: str


def current_fingerprint(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> Fingerprint:
    """The fingerprint of this config, the current reference files, this tool's SQL and the
    summaries' models."""
    references = con.execute(
        "select source, sha256 from market_input_ledger "
        "where status = 'current' and source <> 'receipts' order by all"
    ).fetchall()
    code = [__version__, *(sql_text(name) for name in SUMMARY_SQL), *summary_model_sources()]
    return Fingerprint(config.build_hash(), digest(references), digest(code))


def summary_model_sources() -> list[str]:
    """The source of each summary's pandera model: only the recomputed rows meet it each
    night, so a changed model must see every period again."""
    return [source_of(market_schemas.MARKET_MODELS[name]) for name in SUMMARIES]


def plan_build_periods(ctx: BuildContext) -> None:
    """Decide per summary: full or incremental, and which period ranges to recompute."""
    con = ctx.con
    con.execute(STATE_DDL)
    run_sql(con, "market/042_market_file_periods.sql")
    fingerprint = current_fingerprint(con, ctx.config)
    reasons = {name: full_build_reason(con, ctx.config, name, fingerprint) for name in SUMMARIES}
    con.executemany(
        "insert into market_summary_modes values (?, ?)",
        [[name, reason is not None] for name, reason in reasons.items()],
    )
    run_sql(con, "market/045_market_build_ranges.sql")
    full = [reason for reason in reasons.values() if reason is not None]
    ctx.facts["build_scope"] = {
        "build_mode": "full" if full else "incremental",
        "periods_rebuilt": periods_rebuilt(con),
        "full_build_reason": full[0] if full else None,
    }


def full_build_reason(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, summary: str, fingerprint: Fingerprint
) -> str | None:
    """Why `summary` must be rebuilt from every raw line, or None when its periods suffice."""
    scope = config.markets.receipt_ids_unique_per
    if scope != "store_day":
        return f"markets.receipt_ids_unique_per = {scope!r} lets a visit span periods"
    if not has_ledger(con):
        return NO_LEDGER
    stored = con.execute(
        "select config_hash, references_hash, code_hash from market_summary_state "
        "where summary = $summary",
        {"summary": summary},
    ).fetchall()
    if len(stored) != 1 or not stored_table_exists(con, summary):
        return NO_SUMMARIES
    before = Fingerprint(*stored[0])
    if before.code_hash != fingerprint.code_hash:
        return CODE_CHANGED
    if before.config_hash != fingerprint.config_hash:
        return CONFIG_CHANGED
    if before.references_hash != fingerprint.references_hash:
        return REFERENCES_CHANGED
    undated = con.execute(
        "select min(file_id) from market_file_periods "
        "where rows_accepted > 0 and (first_period is null or last_period is null)"
    ).fetchone()[0]
    if undated is not None:
        return f"the ledger gives no first and last sale time for receipts file {undated}"
    return None


def stored_table_exists(con: duckdb.DuckDBPyConnection, table: str) -> bool:
    return bool(
        con.execute(
            "select count(*) from duckdb_tables() "
            "where table_name = $table and schema_name = current_schema() and not temporary",
            {"table": table},
        ).fetchone()[0]
    )


def periods_rebuilt(con: duckdb.DuckDBPyConnection) -> list[str]:
    """The calendar periods this build recomputes from raw lines, as ISO dates, in order."""
    rows = con.execute(
        "select distinct market_calendar.period_start from market_calendar "
        "semi join market_build_ranges on market_calendar.period_start "
        "between market_build_ranges.first_period and market_build_ranges.last_period "
        "order by 1"
    ).fetchall()
    return [row[0].isoformat() for row in rows]


def scan_params(con: duckdb.DuckDBPyConnection, summary: str) -> dict[str, datetime | None]:
    """`$scan_from` / `$scan_until`: the sale times a summary's periods span (null: none)."""
    first, last = con.execute(
        "select min(market_calendar.date), max(market_calendar.date) from market_calendar "
        "semi join market_build_ranges on market_build_ranges.summary = $summary "
        "and market_calendar.period_start "
        "between market_build_ranges.first_period and market_build_ranges.last_period",
        {"summary": summary},
    ).fetchone()
    if first is None:
        return {"scan_from": None, "scan_until": None}
    # a plain range on sold_at lets DuckDB skip the row groups of other days
    return {
        "scan_from": datetime.combine(first, time()),
        "scan_until": datetime.combine(last + timedelta(days=1), time()),
    }


def is_full_build(con: duckdb.DuckDBPyConnection, summary: str) -> bool:
    """True when `summary` is rebuilt from every period in this build."""
    return con.execute(
        "select full_build from market_summary_modes where summary = $summary",
        {"summary": summary},
    ).fetchone()[0]


def store_summary(ctx: BuildContext, summary: str, model: type[pa.DataFrameModel]) -> int:
    """Validate `<summary>_slice`, merge it into `summary`, check the summary's key and write
    its state, atomically; returns the summary's rows."""
    con = ctx.con
    full = is_full_build(con, summary)
    with ctx.atomic():
        # the kept periods' rows passed this model when they were stored (same fingerprint):
        # only the recomputed rows are read into Python, the key is checked whole in SQL
        validate_table(con, f"{summary}_slice", model, shown_as=summary)
        # the table names are ours (SUMMARIES), never the user's
        if full:
            con.execute(f"create or replace table {summary} as from {summary}_slice")  # noqa: S608
        else:
            _replace_periods(con, summary)
        require_unique_key(con, summary, model, None if full else f"{summary}_slice")
        con.execute(f"drop table {summary}_slice")  # merged: the warehouse keeps one copy
        rows = con.execute(f"select count(*) from {summary}").fetchone()[0]  # noqa: S608
        store_summary_state(con, summary, current_fingerprint(con, ctx.config))
    return rows


def require_unique_key(
    con: duckdb.DuckDBPyConnection,
    table: str,
    model: type[pa.DataFrameModel],
    recomputed: str | None = None,
) -> None:
    """Refuse `table` when two rows share its model's key (`Config.unique`), naming one key.

    `recomputed`: the table of the rows just merged into `table`; the rows kept from before
    had unique keys when they were stored, so a repeated key holds one of these, and only
    their keys are looked at (not every period's, as in a full build)."""
    key = model.to_schema().unique or []
    if not key:
        return
    columns = ", ".join(quote_identifier(column) for column in key)
    # the table names are ours, never the user's
    among = f" semi join {recomputed} using ({columns})" if recomputed else ""
    repeated = con.execute(
        f"select count(*), {columns} from {table}{among} group by all "  # noqa: S608
        "having count(*) > 1 order by all limit 1"
    ).fetchall()
    if repeated:
        count, *values = repeated[0]
        named = ", ".join(
            f"{column} {str(value)!r}" for column, value in zip(key, values, strict=True)
        )
        raise UserError(
            f"stage output {table!r} breaks its schema {model.__name__}: "
            f"{count} rows for one key: {named}",
            "this is a bad input or a bug: a recomputed period repeats a row kept from before.",
        )


def _replace_periods(con: duckdb.DuckDBPyConnection, summary: str) -> None:
    con.execute(
        f"delete from {summary} where exists (select 1 from market_build_ranges "  # noqa: S608
        "where market_build_ranges.summary = $summary "
        f"and {summary}.period_start "
        "between market_build_ranges.first_period and market_build_ranges.last_period)",
        {"summary": summary},
    )
    con.execute(f"insert into {summary} by name from {summary}_slice")  # noqa: S608


def store_summary_state(
    con: duckdb.DuckDBPyConnection, summary: str, fingerprint: Fingerprint
) -> None:
    """Record the fingerprint and the receipts files (with their periods) `summary` now holds."""
    params = {"summary": summary}
    con.execute("delete from market_summary_state where summary = $summary", params)
    con.execute(
        "insert into market_summary_state values ($summary, $config, $references, $code)",
        params
        | {
            "config": fingerprint.config_hash,
            "references": fingerprint.references_hash,
            "code": fingerprint.code_hash,
        },
    )
    con.execute("delete from market_summary_files where summary = $summary", params)
    con.execute(
        "insert into market_summary_files "
        "select $summary, file_id, sha256, first_period, last_period from market_file_periods",
        params,
    )
