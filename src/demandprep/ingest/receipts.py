"""Load a batch of receipts files: type their lines, apply the rules in order, keep the good ones.

Runs inside the caller's transaction, after the reader staged the file. The rules and their
order live in sql/ingest/020_receipt_lines_checked.sql; duplicates in 030. Timezone: when
`sources.receipts.timezone` is set, the written times are read as wall-clock times of that zone
and converted to each store's local time (the stores table's `timezone` column when mapped;
otherwise, or for a store without one, the times stay as written in the configured zone).
"""

from __future__ import annotations

from datetime import datetime, time, timedelta

import duckdb

from demandprep.config import (
    DECIMAL_LIMIT,
    RECEIPT_OPTIONAL,
    RECEIPT_REQUIRED,
    ProjectConfig,
    ReceiptSource,
)
from demandprep.errors import UserError
from demandprep.ingest.line_checks import validate_raw_lines
from demandprep.ingest.reader import SourceColumn, is_typed_timestamp
from demandprep.ingest.references import table_columns
from demandprep.ingest.timings import PhaseTimer
from demandprep.personal import carries_cards
from demandprep.schemas.ingest import RawLines
from demandprep.sqlfiles import run_sql

RECEIPT_NAMES = RECEIPT_REQUIRED + RECEIPT_OPTIONAL


def prepare_receipts(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Settings the receipt rules read: each store's timezone when times need converting."""
    receipts = config.sources.receipts
    zone = receipts.timezone
    if zone is not None:
        known = con.execute(
            "select count(*) from pg_timezone_names() where name = $zone", {"zone": zone}
        ).fetchone()[0]
        if not known:
            raise UserError(
                f"{config.config_path}: key 'sources.receipts.timezone': {zone!r} is not a known "
                "timezone.",
                "use an IANA name such as 'UTC' or 'Europe/Lisbon'.",
            )
    has_zones = (
        zone is not None
        and "timezone" in config.sources.stores.columns
        and "timezone" in table_columns(con, "stores")
    )
    con.execute(
        "create or replace temp table ingest_store_timezones as "
        + (
            "select store, timezone from stores where timezone is not null"
            if has_zones
            else "select null::varchar as store, null::varchar as timezone where false"
        )
    )


def check_receipt_lines(
    con: duckdb.DuckDBPyConnection,
    source: ReceiptSource,
    mapped: dict[str, SourceColumn],
    timer: PhaseTimer | None = None,
) -> None:
    """Type and check the staged lines into `ingest_checked`, then mark the duplicates and
    record the unknown SKUs and stores."""
    timer = timer or PhaseTimer()
    values_shown = not carries_cards(mapped)
    with timer.phase("classify"):
        run_sql(
            con,
            "ingest/020_receipt_lines_checked.sql",
            {**_rule_parameters(source, mapped), "values_shown": values_shown},
        )
    with timer.phase("dedupe"):
        _mark_duplicates(con, values_shown)
    with timer.phase("classify"):
        # the unknown SKUs and stores, so a table that lists one later brings the lines in (075)
        run_sql(con, "ingest/033_quarantined_keys.sql")


def _mark_duplicates(con: duckdb.DuckDBPyConnection, values_shown: bool) -> None:
    first, last = con.execute(
        "select min(sold_at), max(sold_at) from ingest_checked where reason is null"
    ).fetchone()
    if first is None:
        return
    window = {
        "first_day": datetime.combine(first.date(), time()),
        "after_last_day": datetime.combine(last.date() + timedelta(days=1), time()),
    }
    run_sql(con, "ingest/030_receipt_duplicates.sql", window)
    run_sql(con, "ingest/031_mark_duplicates.sql", {"values_shown": values_shown})
    run_sql(con, "ingest/032_duplicate_days.sql")


def _rule_parameters(source: ReceiptSource, mapped: dict[str, SourceColumn]) -> dict[str, object]:
    typed_times = is_typed_timestamp(mapped.get("sold_at"))
    return {
        # typed (Parquet) timestamps arrive as ISO text, read by a plain cast
        "timestamp_format": None if typed_times else source.timestamp_format,
        "decimal": "." if source.format == "parquet" else source.decimal,
        "source_timezone": source.timezone,
        "valid_from": _day_start(source.valid_from),
        "valid_until": _day_start(source.valid_to, plus_days=1),
        # the build casts to DECIMAL(18, 6): no bound may let a larger value through
        "max_quantity": min(source.max_quantity, DECIMAL_LIMIT),
        "max_amount": min(source.max_amount, DECIMAL_LIMIT),
    }


def _day_start(day, plus_days: int = 0) -> datetime | None:
    if day is None:
        return None
    return datetime.combine(day + timedelta(days=plus_days), time())


def insert_receipt_lines(con: duckdb.DuckDBPyConnection) -> None:
    """Append the accepted lines of `ingest_checked` to raw_lines under their file ids."""
    run_sql(con, "ingest/040_raw_lines_insert.sql")


def count_accepted_lines(con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
    """`ingest_accepted_counts`: accepted lines per file of the batch, from raw_lines."""
    run_sql(con, "ingest/041_accepted_receipt_counts.sql", id_range)


def validate_receipt_lines(con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
    """Guard the batch's accepted lines with the RawLines schema (SQL twins and a sample)."""
    validate_raw_lines(con, id_range, model=RawLines)
