"""The source-specific half of loading a batch: receipts, and each reference table.

The runner does what is common (transaction, reader, quarantine, ledger); a loader says which
columns the source has, how its staged rows are checked, where the accepted rows go and how
they are counted and guarded.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Protocol

import duckdb

from demandprep.config import FileSource, ProjectConfig
from demandprep.ingest import receipts as receipt_rules
from demandprep.ingest import references as refs
from demandprep.ingest.reader import FileRefused, SourceColumn, file_columns
from demandprep.ingest.timings import PhaseTimer
from demandprep.schemas.ingest import REFERENCE_MODELS
from demandprep.sqlfiles import quote_identifier
from demandprep.validate import validate_query


class Loader(Protocol):
    """What the runner needs from a source."""

    source: FileSource

    def names(self) -> tuple[str, ...]:
        """Our names of the source's columns."""
        ...

    def check(
        self, con: duckdb.DuckDBPyConnection, first_path: Path, mapped: dict[str, SourceColumn]
    ) -> None:
        """Type and check the staged rows into `ingest_checked` (reason null = accepted)."""
        ...

    def remove_previous(self, con: duckdb.DuckDBPyConnection) -> None:
        """Delete the rows of the older versions of the batch's changed files."""
        ...

    def insert(self, con: duckdb.DuckDBPyConnection) -> None:
        """Add the accepted rows to the source's table."""
        ...

    def count_accepted(self, con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
        """Create `ingest_accepted_counts` (file_id, rows, first_sold_at, last_sold_at)."""
        ...

    def validate(self, con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
        """Guard what the batch added with the source's pandera schema."""
        ...


@dataclass
class ReceiptLoader:
    """Receipt lines into raw_lines."""

    source: FileSource
    config: ProjectConfig
    # the seconds of the rules (classify) and of the duplicate rule (dedupe) go here
    timer: PhaseTimer = field(default_factory=PhaseTimer)

    def names(self) -> tuple[str, ...]:
        """Our receipt columns, required and optional."""
        return receipt_rules.RECEIPT_NAMES

    def check(
        self, con: duckdb.DuckDBPyConnection, first_path: Path, mapped: dict[str, SourceColumn]
    ) -> None:
        """Apply the receipt rules and the duplicate rule to the staged lines."""
        receipt_rules.check_receipt_lines(con, self.config.sources.receipts, mapped, self.timer)

    def remove_previous(self, con: duckdb.DuckDBPyConnection) -> None:
        """Delete the raw lines of the older versions of the batch's changed files."""
        con.execute(
            "delete from raw_lines where file_id in (select previous_file_id "
            "from ingest_batch_files where previous_file_id is not null)"
        )

    def insert(self, con: duckdb.DuckDBPyConnection) -> None:
        """Append the accepted lines to raw_lines."""
        receipt_rules.insert_receipt_lines(con)

    def count_accepted(self, con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
        """Accepted lines per file, counted in raw_lines."""
        receipt_rules.count_accepted_lines(con, id_range)

    def validate(self, con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
        """Guard the batch's accepted lines with the RawLines schema."""
        receipt_rules.validate_receipt_lines(con, id_range)


@dataclass
class ReferenceLoader:
    """One reference source into ref_<table>, read through the view named as in the contract."""

    source: FileSource
    spec: refs.ReferenceSpec
    # the seconds of the rules (classify) and of the duplicate rule (dedupe) go here
    timer: PhaseTimer = field(default_factory=PhaseTimer)

    def names(self) -> tuple[str, ...]:
        """Our names of the mapped columns, in mapping order."""
        return tuple(self.source.columns)

    def check(
        self, con: duckdb.DuckDBPyConnection, first_path: Path, mapped: dict[str, SourceColumn]
    ) -> None:
        """Type the staged rows, apply the reference rules and the duplicate-key rule."""
        timer = self.timer
        with timer.phase("classify"):
            sniffed = self._sniffed_types(con, first_path, mapped)
            types = refs.column_types(con, self.spec, mapped, sniffed)
            sql = refs.check_reference_sql(self.spec, types)
            con.execute(sql, {"decimal": self._decimal()} if "$decimal" in sql else None)
        with timer.phase("dedupe"):
            names = list(types)
            con.execute(refs.duplicates_sql(con, self.spec, names))
            con.execute(refs.mark_duplicates_sql(self.spec, names))
        with timer.phase("insert"):
            con.execute(refs.ensure_storage_sql(self.spec, types))

    def _decimal(self) -> str:
        return "." if self.source.format == "parquet" else self.source.decimal

    def _sniffed_types(
        self, con: duckdb.DuckDBPyConnection, path: Path, mapped: dict[str, SourceColumn]
    ) -> dict[str, str]:
        if self.source.format == "parquet":
            return {column.name: column.type for column in mapped.values()}
        # DuckDB's sniffer refuses some files the reader takes (a lone CR, mixed line ends):
        # then every column is typed from its values below. It runs on its own cursor, so its
        # error does not abort the batch's transaction.
        with con.cursor() as sniffer:
            try:
                typed = file_columns(sniffer, path, self.source, typed=True)
            except FileRefused:
                typed = ()
        sniffed = {c.name: c.type for c in typed}
        for ours, theirs in mapped.items():
            # a column the sniffer gave no type (it refused the file) is text to it too
            if (
                ours not in self.spec.fixed_types
                and sniffed.get(theirs.name, "VARCHAR") == "VARCHAR"
            ):
                sniffed[theirs.name] = refs.mostly_typed(con, ours, self._decimal())
        return sniffed

    def remove_previous(self, con: duckdb.DuckDBPyConnection) -> None:
        """Delete the rows of the older versions of the batch's changed files."""
        if refs.table_columns(con, self.spec.storage):
            con.execute(refs.remove_previous_sql(self.spec))

    def insert(self, con: duckdb.DuckDBPyConnection) -> None:
        """Add the accepted rows and (re)create the contract view."""
        names = list(self.names())
        con.execute(refs.insert_sql(self.spec, names))
        con.execute(refs.view_sql(self.spec, names))

    def count_accepted(self, con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
        """Accepted rows per file, counted in ref_<table>."""
        con.execute(refs.accepted_counts_sql(self.spec), id_range)

    def validate(self, con: duckdb.DuckDBPyConnection, id_range: dict[str, str]) -> None:
        """Guard the whole reference table (every file of it) with its schema."""
        model = REFERENCE_MODELS[self.spec.table]
        table = quote_identifier(self.spec.table)
        validate_query(con, f"select * from {table}", {}, model, self.spec.table)
