"""Load the reference sources (catalogue, stores, households, shelf prices, market sizes, cost
shifters) through the same reader, quarantine and ledger as the receipts.

Rows live in `ref_<table>` with their file id and line number, so a changed file replaces only
its own rows; the table the other steps read (`catalogue`, `stores`, ...) is a view of it with
exactly the mapped columns, in our names. Known columns have fixed types (sku, store, date,
price...); every other mapped column takes the type DuckDB's sniffer gives it in the first file
(Parquet: its own type), or BIGINT/DOUBLE/DATE when the sniffer says text (or refuses the file)
but at least 90% of the values are one (the others are quarantined as unparseable); later files
are cast to the stored type. When every current file of a source is read again (new settings,
new content, --reload; runner.mark_source_rebuilds), its table is rebuilt and typed afresh. A
change of a source's mapped columns (config) reloads all its files.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import duckdb

from demandprep.config import REFERENCE_REQUIRED, FileSource
from demandprep.ingest.reader import SourceColumn
from demandprep.personal import carries_cards
from demandprep.sqlfiles import quote_identifier

ALLOWED_TYPES = ("VARCHAR", "BIGINT", "DOUBLE", "BOOLEAN", "DATE", "TIMESTAMP")
INTEGER_TYPES = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "UTINYINT", "USMALLINT", "UINTEGER")
FLOAT_TYPES = ("FLOAT", "DOUBLE", "REAL", "HUGEINT", "UBIGINT")
MOSTLY = 0.9  # share of values that must parse for a text column to keep a type; no source
# what an unparseable value of each type is not, for the quarantine detail
NOT_A = {
    "BIGINT": "not a whole number",
    "DOUBLE": "not a number",
    "BOOLEAN": "not true or false",
    "DATE": "not a date",
    "TIMESTAMP": "not a timestamp",
}


@dataclass(frozen=True)
class ReferenceSpec:
    """How one reference source is typed and checked."""

    source: str
    table: str
    key: tuple[str, ...]
    fixed_types: dict[str, str]
    positive: tuple[str, ...] = ()
    must_exist: dict[str, tuple[str, str]] = field(default_factory=dict)
    checks_timezone: bool = False

    @property
    def storage(self) -> str:
        """The table that holds the rows with their file ids."""
        return f"ref_{self.table}"

    @property
    def required(self) -> tuple[str, ...]:
        """Our columns that must be present on every row."""
        return REFERENCE_REQUIRED[self.source]


REFERENCE_SPECS: dict[str, ReferenceSpec] = {
    "catalogue": ReferenceSpec(
        "catalogue", "catalogue", ("sku",), {"sku": "VARCHAR", "category": "VARCHAR"}
    ),
    "stores": ReferenceSpec(
        "stores",
        "stores",
        ("store",),
        {"store": "VARCHAR", "timezone": "VARCHAR"},
        checks_timezone=True,
    ),
    "households": ReferenceSpec("households", "households", ("card",), {"card": "VARCHAR"}),
    "shelf_prices": ReferenceSpec(
        "shelf_prices",
        "shelf_prices",
        ("store", "date", "sku"),
        {
            "store": "VARCHAR",
            "date": "DATE",
            "sku": "VARCHAR",
            "price": "DOUBLE",
            "promo": "BOOLEAN",
        },
        positive=("price",),
        must_exist={"store": ("stores", "store"), "sku": ("catalogue", "sku")},
    ),
    "market_sizes": ReferenceSpec(
        "market_sizes",
        "market_size_table",
        ("geography", "period"),
        {"geography": "VARCHAR", "period": "DATE", "size": "DOUBLE"},
        positive=("size",),
    ),
    "cost_shifters": ReferenceSpec(
        "cost_shifters",
        "cost_shifters",
        ("period", "firm", "product"),
        {"period": "DATE", "firm": "VARCHAR", "product": "VARCHAR"},
    ),
}


def table_columns(con: duckdb.DuckDBPyConnection, table: str) -> dict[str, str]:
    """Column name -> type of a warehouse table or view; empty when it does not exist."""
    rows = con.execute(
        "select column_name, data_type from information_schema.columns "
        "where table_name = $table and table_schema = current_schema() "
        "order by ordinal_position",
        {"table": table},
    ).fetchall()
    return {name: kind for name, kind in rows}


def layout_changed(con: duckdb.DuckDBPyConnection, spec: ReferenceSpec, source: FileSource) -> bool:
    """True when the stored rows were loaded with another set of mapped columns."""
    stored = table_columns(con, spec.storage)
    if not stored:
        return False
    return list(stored)[2:] != list(source.columns)


def drop_reference_storage(con: duckdb.DuckDBPyConnection, spec: ReferenceSpec) -> None:
    """Drop a reference's rows and view inside the caller's transaction (files read again)."""
    con.execute(f"drop view if exists {quote_identifier(spec.table)}")
    con.execute(f"drop table if exists {quote_identifier(spec.storage)}")


def column_types(
    con: duckdb.DuckDBPyConnection,
    spec: ReferenceSpec,
    mapped: dict[str, SourceColumn],
    sniffed: dict[str, str],
) -> dict[str, str]:
    """Our column -> type: fixed for known columns, else the stored or sniffed type."""
    stored = table_columns(con, spec.storage)
    types = {}
    for ours, theirs in mapped.items():
        if ours in spec.fixed_types:
            types[ours] = spec.fixed_types[ours]
        elif ours in stored:
            types[ours] = _allowed_type(stored[ours])
        else:
            types[ours] = _allowed_type(sniffed.get(theirs.name, "VARCHAR"))
    return types


def mostly_typed(con: duckdb.DuckDBPyConnection, column: str, decimal: str) -> str:
    """BIGINT, DOUBLE or DATE when at least MOSTLY of a text column's values are one, else VARCHAR.

    DuckDB's sniffer makes a column text as soon as one value is not a number; here a few bad
    values are quarantined instead (unparseable_field) and the column keeps its type.
    """
    text = f"nullif(trim({quote_identifier(column)}), '')"
    values, integers, numbers, dates = con.execute(
        f"select count({text}), count(ingest_integer({text})), "  # noqa: S608
        f"count(ingest_number({text}, $decimal)), count(try_cast({text} as date)) "
        "from ingest_source_lines",
        {"decimal": decimal},
    ).fetchone()
    for kind, parsed in (("BIGINT", integers), ("DOUBLE", numbers), ("DATE", dates)):
        if values and parsed >= MOSTLY * values:
            return kind
    return "VARCHAR"


def _allowed_type(kind: str) -> str:
    kind = kind.upper()
    if kind in INTEGER_TYPES:
        return "BIGINT"
    if kind in FLOAT_TYPES or kind.startswith("DECIMAL"):
        return "DOUBLE"
    if kind.startswith("TIMESTAMP"):
        return "TIMESTAMP"
    return kind if kind in ALLOWED_TYPES else "VARCHAR"


def _parsed(column: str, kind: str) -> str:
    text = quote_identifier(f"{column} text")
    if kind == "VARCHAR":
        return text
    if kind == "DOUBLE":
        return f"ingest_number({text}, $decimal)"
    if kind == "BIGINT":
        return f"ingest_integer({text})"
    return f"try_cast({text} as {kind})"


def check_reference_sql(spec: ReferenceSpec, types: dict[str, str]) -> str:
    """SQL that types and checks the staged rows into `ingest_checked` (reason null = accepted).

    Column names are the config's identifiers (checked, quoted); types come from ALLOWED_TYPES.
    """
    names = list(types)
    q = {name: quote_identifier(name) for name in names}
    texts = ", ".join(
        f"nullif(trim({q[name]}), '') as {quote_identifier(name + ' text')}" for name in names
    )
    parsed = ", ".join(f"{_parsed(name, types[name])} as {q[name]}" for name in names)
    rules = _reference_rules(spec, names, types)
    cases = " ".join(f"when {condition} then '{reason}'" for condition, reason, _ in rules)
    details = " ".join(f"when '{reason}' then {detail}" for _, reason, detail in rules)
    columns = ", ".join(q[name] for name in names)
    return (
        "create temp table ingest_checked as "
        "with texts as (select ordinal, path, line_no, "
        f"{texts} from ingest_source_lines), "
        f"typed as (select *, {parsed} from texts), "
        f"classified as (select *, case {cases} end as reason from typed), "
        f"fielded as (select *, {_reason_field_sql(spec, names, types)} as reason_field "
        "from classified) "
        f"select ordinal, path, line_no, {columns}, reason_field, reason, "
        f"case reason {details} end as detail from fielded"
    )


def _reason_field_sql(spec: ReferenceSpec, names: list[str], types: dict[str, str]) -> str:
    """SQL naming which of our columns decided a row's reason (for the refusal message)."""

    def text(name: str) -> str:
        return quote_identifier(f"{name} text")

    def first(pairs: list[tuple[str, str]]) -> str:
        cases = " ".join(f"when {condition} then '{name}'" for condition, name in pairs)
        return f"case {cases} end" if pairs else "null"

    required = [name for name in spec.required if name in names]
    typed = [name for name in names if types[name] != "VARCHAR"]
    unparsed = [(f"{text(n)} is not null and {quote_identifier(n)} is null", n) for n in typed]
    by_reason = {
        "missing_required_field": first([(f"{text(n)} is null", n) for n in required]),
        "unparseable_field": first(unparsed),
        "non_positive_value": first(
            [(f"{quote_identifier(n)} <= 0", n) for n in spec.positive if n in names]
        ),
        "unknown_timezone": "'timezone'",
        "unknown_store": "'store'",
        "unknown_sku": "'sku'",
    }
    cases = " ".join(f"when '{reason}' then {field}" for reason, field in by_reason.items())
    return f"case reason {cases} end"


def _reference_rules(
    spec: ReferenceSpec, names: list[str], types: dict[str, str]
) -> list[tuple[str, str, str]]:
    """(condition, reason, detail expression) in the order they are tried."""

    def text(name: str) -> str:
        return quote_identifier(f"{name} text")

    def problem(name: str, what: str) -> str:
        return f"ingest_problem('{name}', '{what}', {text(name)}, {shown})"

    # Why: a card id can sit in any field of a line of a card-bearing source, so none is quoted.
    shown = "false" if carries_cards(names) else "true"
    required = [name for name in spec.required if name in names]
    rules = []
    if required:
        missing = " or ".join(f"{text(n)} is null" for n in required)
        listed = ", ".join(f"case when {text(n)} is null then '{n}' end" for n in required)
        rules.append((missing, "missing_required_field", f"'empty: ' || concat_ws(', ', {listed})"))
    typed = [name for name in names if types[name] != "VARCHAR"]
    if typed:
        bad = " or ".join(
            f"({text(n)} is not null and {quote_identifier(n)} is null)" for n in typed
        )
        listed = ", ".join(
            f"case when {text(n)} is not null and {quote_identifier(n)} is null "
            f"then {problem(n, NOT_A[types[n]])} end"
            for n in typed
        )
        rules.append((bad, "unparseable_field", f"concat_ws('; ', {listed})"))
    for name in spec.positive:
        if name in names:
            rules.append(
                (
                    f"{quote_identifier(name)} <= 0",
                    "non_positive_value",
                    problem(name, "zero or less"),
                )
            )
    if spec.checks_timezone and "timezone" in names:
        rules.append(
            (
                f"{text('timezone')} is not null and {text('timezone')} not in "
                "(select name from pg_timezone_names())",
                "unknown_timezone",
                problem("timezone", "not a known timezone"),
            )
        )
    for name, (table, column) in spec.must_exist.items():
        if name in names:
            reason = "unknown_store" if name == "store" else "unknown_sku"
            rules.append(
                (
                    f"{quote_identifier(name)} not in (select {quote_identifier(column)} "
                    f"from {quote_identifier(table)} where {quote_identifier(column)} is not null)",
                    reason,
                    problem(name, f"not in the {table} table"),
                )
            )
    return rules


def duplicates_sql(con: duckdb.DuckDBPyConnection, spec: ReferenceSpec, names: list[str]) -> str:
    """SQL of `ingest_duplicates`: accepted rows whose key was accepted earlier or elsewhere."""
    key = [quote_identifier(name) for name in spec.key if name in names]
    partition = ", ".join(key)
    parts = [
        "select ordinal from candidates "
        f"qualify row_number() over (partition by {partition} order by ordinal) > 1"
    ]
    if table_columns(con, spec.storage):
        matches = " and ".join(f"s.{k} is not distinct from c.{k}" for k in key)
        parts.append(
            f"select c.ordinal from candidates c semi join {quote_identifier(spec.storage)} s "
            f"on {matches}"
        )
    return (
        "create temp table ingest_duplicates as "
        f"with candidates as (select ordinal, {partition} from ingest_checked "
        "where reason is null) " + " union ".join(parts)
    )


def mark_duplicates_sql(spec: ReferenceSpec, names: list[str]) -> str:
    """SQL that quarantines the rows of `ingest_duplicates` as duplicate keys.

    The key's values are quoted only for sources without card ids (e.g. "card: duplicate key").
    """
    key = [name for name in spec.key if name in names]
    detail = f"'{', '.join(key)}: duplicate key'"
    if not carries_cards(names):
        values = ", ".join(
            f"'{name}=' || coalesce({quote_identifier(name)}::varchar, '')" for name in key
        )
        detail += f" || ' (' || concat_ws(', ', {values}) || ')'"
    return (
        f"update ingest_checked set reason = 'duplicate_key', detail = {detail} "
        "where ordinal in (select ordinal from ingest_duplicates)"
    )


def ensure_storage_sql(spec: ReferenceSpec, types: dict[str, str]) -> str:
    """SQL creating `ref_<table>` (file id, line number, our columns) when it does not exist."""
    columns = ", ".join(f"{quote_identifier(name)} {kind}" for name, kind in types.items())
    return (
        f"create table if not exists {quote_identifier(spec.storage)} "
        f"(file_id varchar not null, line_no bigint, {columns})"
    )


def insert_sql(spec: ReferenceSpec, names: list[str]) -> str:
    """SQL adding the accepted rows of `ingest_checked` to `ref_<table>` under their file ids."""
    columns = ", ".join(quote_identifier(name) for name in names)
    checked = ", ".join(f"c.{quote_identifier(name)}" for name in names)
    return (
        f"insert into {quote_identifier(spec.storage)} (file_id, line_no, {columns}) "
        f"select f.file_id, c.line_no, {checked} from ingest_checked c "
        "join ingest_batch_files f using (path) where c.reason is null"
    )


def remove_previous_sql(spec: ReferenceSpec) -> str:
    """SQL deleting the rows of the older versions of the batch's changed files."""
    return (
        f"delete from {quote_identifier(spec.storage)} where file_id in "
        "(select previous_file_id from ingest_batch_files where previous_file_id is not null)"
    )


def accepted_counts_sql(spec: ReferenceSpec) -> str:
    """SQL of `ingest_accepted_counts`: accepted rows per file of the batch, from ref_<table>."""
    return (
        "create temp table ingest_accepted_counts as select file_id, count(*) as rows, "
        "null::timestamp as first_sold_at, null::timestamp as last_sold_at "
        f"from {quote_identifier(spec.storage)} "
        "where file_id >= $first_file_id and file_id <= $last_file_id group by all"
    )


def view_sql(spec: ReferenceSpec, names: list[str]) -> str:
    """SQL of the table the other steps read: exactly our mapped columns."""
    columns = ", ".join(quote_identifier(name) for name in names)
    return (
        f"create or replace view {quote_identifier(spec.table)} as "
        f"select {columns} from {quote_identifier(spec.storage)}"
    )
