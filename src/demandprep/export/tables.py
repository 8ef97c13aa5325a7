"""Which warehouse tables become which files of a build folder, and the query that reads each.

Every query orders its rows totally so the same warehouse gives the same Parquet bytes: by the
file's sort keys, which the step's pandera model proves unique (e.g. occasion and alternative),
or, where no model makes them unique, by the keys and then every other column. A table its step
stores in key order (`choices`) also gets that query without its sort: the writer tries it first
and checks the order as the rows pass (export/parquet.py). Raw loyalty card
ids never leave the warehouse: the quarantine's original line text is kept only for sources
whose column mapping has no card column.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.errors import UserError
from demandprep.sqlfiles import quote_identifier

# Column names that would carry raw card ids; no exported table may have one.
FORBIDDEN_COLUMNS = ("card",)
# Warehouse columns a data file leaves out: the ledger's load time would make two identical
# builds differ (it stays in the warehouse's ledger).
UNEXPORTED_COLUMNS: dict[str, tuple[str, ...]] = {"ledger": ("ingested_at",)}
WITHHELD_FLAG = "original_text_withheld"
# Kinds whose step stores the warehouse table in the file's key order (its unique sort keys):
# sorting them again would cost more than the rest of their export (150 M rows of choices).
STORED_IN_KEY_ORDER = ("choices",)


@dataclass(frozen=True)
class OutputTable:
    """One data file of the build: its name, what it reads, and how its rows are ordered."""

    name: str
    kind: str
    table: str
    sort_keys: tuple[str, ...]
    assumption: str | None = None
    keys_unique: bool = False
    metadata: dict[str, str] = field(default_factory=dict)
    stored_in_key_order: bool = False

    @property
    def file_name(self) -> str:
        """The Parquet file name inside the build folder."""
        return f"{self.name}.parquet"


@dataclass(frozen=True)
class TableQuery:
    """A static select over one warehouse table with its bound parameters."""

    sql: str
    params: dict[str, Any]
    # the same select without its sort, for a table stored in key order (else None)
    stored_order_sql: str | None = None


# kind -> (warehouse table, sort keys, required?, keys unique by the step's model?)
_KINDS: dict[str, tuple[str, tuple[str, ...], bool, bool]] = {
    "shares": ("share_table", ("market", "product"), True, True),
    "markets": ("markets", ("market",), True, True),
    "products": ("products", ("product",), False, True),
    "geographies": ("geographies", ("geography",), False, True),
    "demographics": ("demographic_draws", ("market", "draw"), False, True),
    "choices": ("choices", ("occasion", "alternative"), False, True),
    "choosers": ("choosers", ("chooser",), False, True),
    "ledger": ("ledger", ("path", "version", "file_id"), True, True),
    "ledger_reasons": ("ledger_reasons", ("file_id", "reason"), True, False),
    "quarantine": ("quarantine", ("file_id", "line_no", "reason"), True, False),
}


# Files of the market build, left out of a choice-only project (ProjectConfig.market_build_enabled).
MARKET_KINDS = ("shares", "markets", "products", "geographies", "demographics")
# Files written once per market-size assumption, as <kind>_<assumption>.parquet.
PER_ASSUMPTION_KINDS = ("shares", "markets", "demographics")


def plan_outputs(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[OutputTable]:
    """The data files this build writes, in a fixed order; a missing required table is an error."""
    present = set(_table_names(con))
    outputs: list[OutputTable] = []
    for kind, (table, keys, required, unique) in _KINDS.items():
        if kind in MARKET_KINDS and not config.market_build_enabled:
            continue  # a choice-only project: even a market table left from before stays out
        if kind == "demographics" and config.demographic_draws.draws is None:
            continue  # draws not asked for: a table left from an earlier config stays out
        if kind in ("choices", "choosers") and not config.choices.enabled:
            continue  # choices off: an earlier build's choice tables stay out
        if table not in present:
            if required or (kind in ("choices", "choosers") and config.choices.enabled):
                raise UserError(
                    f"warehouse table {table!r} is missing, so the build folder cannot be written.",
                    "run the ingest and every build stage before exporting.",
                )
            continue
        if kind in PER_ASSUMPTION_KINDS:
            outputs += [
                OutputTable(
                    f"{kind}_{name}",
                    kind,
                    table,
                    keys,
                    name,
                    keys_unique=unique,
                    metadata={"assumption": name},
                )
                for name in config.market_size
            ]
        else:
            outputs.append(output_table(kind))
    return outputs


def output_table(kind: str) -> OutputTable:
    """The one data file of a kind written once per build (not per assumption), e.g. 'choices'."""
    table, keys, _required, unique = _KINDS[kind]
    stored = kind in STORED_IN_KEY_ORDER
    return OutputTable(kind, kind, table, keys, keys_unique=unique, stored_in_key_order=stored)


def table_columns(con: duckdb.DuckDBPyConnection, table: str) -> list[str]:
    """The column names of a warehouse table, in table order."""
    rows = con.execute(
        "select column_name from duckdb_columns() where table_name = $table "
        "and schema_name = current_schema() order by column_index",
        {"table": table},
    ).fetchall()
    return [row[0] for row in rows]


def output_query(
    con: duckdb.DuckDBPyConnection,
    output: OutputTable,
    config: ProjectConfig,
    after: tuple[Any, ...] | None = None,
) -> TableQuery:
    """The ordered select that reads one output's rows from the warehouse; with `after`
    (values of its unique sort keys), only the rows whose keys come after those."""
    left_out = UNEXPORTED_COLUMNS.get(output.kind, ())
    columns = [c for c in table_columns(con, output.table) if c not in left_out]
    _refuse_card_columns(output, columns)
    missing = [key for key in output.sort_keys if key not in columns]
    if missing:
        raise UserError(
            f"warehouse table {output.table!r} lacks column {missing[0]!r}, needed to sort "
            f"{output.file_name}.",
            "the stage that writes it does not follow the table contract; this is a bug.",
        )
    select = [_select_item(column, output) for column in columns]
    params: dict[str, Any] = {}
    if output.kind == "quarantine" and "original_text" in columns:
        select.append(f"not list_contains($text_sources, source) as {WITHHELD_FLAG}")
        params["text_sources"] = card_free_sources(config)
    where = ""
    if output.assumption is not None:
        where = " where assumption = $assumption"
        params["assumption"] = output.assumption
    if after is not None:
        where += f"{' and' if where else ' where'} {_after_keys(output.sort_keys)}"
        params |= {f"after_{i}": value for i, value in enumerate(after)}
    # Why: extra sort columns cost time on big tables and change nothing when keys are unique.
    ties = [] if output.keys_unique else [c for c in columns if c not in output.sort_keys]
    order = ", ".join(f"{quote_identifier(c)} nulls last" for c in (*output.sort_keys, *ties))
    unsorted = f"select {', '.join(select)} from {output.table}{where}"  # noqa: S608
    stored = unsorted if output.stored_in_key_order and output.keys_unique else None
    return TableQuery(f"{unsorted} order by {order}", params, stored)


def _after_keys(keys: tuple[str, ...]) -> str:
    """Rows whose keys come after `$after_0`, `$after_1`, ... in key order (the first key's
    bound alone lets DuckDB skip row groups by their min-max)."""
    names = [quote_identifier(key) for key in keys]
    clause = f"{names[-1]} > $after_{len(names) - 1}"
    for i in range(len(names) - 2, -1, -1):
        clause = f"({names[i]} > $after_{i} or ({names[i]} = $after_{i} and {clause}))"
    return f"{names[0]} >= $after_0 and {clause}"


def card_free_sources(config: ProjectConfig) -> list[str]:
    """Config sources whose column mapping has no card column: their raw lines may be exported."""
    return sorted(
        name
        for name, source in config.sources
        if source is not None and not any(column in source.columns for column in FORBIDDEN_COLUMNS)
    )


def _select_item(column: str, output: OutputTable) -> str:
    quoted = quote_identifier(column)
    if output.kind == "quarantine" and column == "original_text":
        # Why: a quarantined receipt or household line can hold a raw card id in any field
        # (malformed lines shift fields), so such lines are withheld whole, not masked.
        return f"case when list_contains($text_sources, source) then {quoted} end as {quoted}"
    return quoted


def _refuse_card_columns(output: OutputTable, columns: list[str]) -> None:
    found = [column for column in columns if column in FORBIDDEN_COLUMNS]
    if found:
        raise UserError(
            f"warehouse table {output.table!r} has a column {found[0]!r}; raw card ids are "
            "never exported.",
            "the stage that writes it must carry the pseudonym instead; this is a bug.",
        )


def _table_names(con: duckdb.DuckDBPyConnection) -> list[str]:
    rows = con.execute(
        "select table_name from duckdb_tables() where schema_name = current_schema() "
        "union all select view_name from duckdb_views() where schema_name = current_schema() "
        "and not internal"
    ).fetchall()
    return [row[0] for row in rows]
