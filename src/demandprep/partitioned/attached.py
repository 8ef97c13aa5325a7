"""The partitions' warehouses attached read-only to the coordinator's connection.

The coordinator holds no receipt line: the steps that need lines across partitions (the choice
build, whose chooser histories cross stores; the demographic draws; the calendar's count of the
lines against the ledger, market/inputs.py) read them where they are, through `raw_lines` as a
temporary view over the union of the partitions' own `raw_lines`. The view lives on the connection
only and shadows the coordinator's (empty) table there; nothing is copied. The partitions' file ids
are replaced by the coordinator's ids of the same file versions, so the view reads as one
warehouse's table.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import duckdb

from demandprep.config import ProjectConfig
from demandprep.partitioned.plan import Partition, partition_config


@contextmanager
def partitions_attached(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, partitions: list[Partition]
) -> Iterator[list[str]]:
    """Attach each partition's warehouse read-only; yields their aliases, detaches after."""
    with warehouses_attached(con, partition_warehouses(config, partitions)) as aliases:
        yield aliases


def partition_warehouses(config: ProjectConfig, partitions: list[Partition]) -> list[str]:
    """The paths of the partitions' warehouse files, in the partitions' order."""
    return [str(partition_config(config, item).warehouse.path) for item in partitions]


@contextmanager
def warehouses_attached(con: duckdb.DuckDBPyConnection, paths: list[str]) -> Iterator[list[str]]:
    """Attach each warehouse file read-only as partition_<n>; yields the aliases, detaches after."""
    aliases = [f"partition_{index}" for index, _ in enumerate(paths)]
    attached = []
    try:
        for alias, path in zip(aliases, paths, strict=True):
            # the alias is ours (a counter); the path is bound
            con.execute(f"attach $path as {alias} (read_only)", {"path": path})
            attached.append(alias)
        yield aliases
    finally:
        for alias in attached:
            con.execute(f"detach {alias}")


def union_of(aliases: list[str], select: str) -> str:
    """`select` (reading `{p}.<table>`) run on every attached partition, as one union."""
    # each alias is ours (partitions_attached); `select` is a constant of this package
    return " union all ".join(select.format(p=alias) for alias in aliases)


# a partition's lines with the coordinator's file id of the same file version
PARTITION_LINES = (
    "select lines.* replace (coordinator.file_id as file_id) "
    "from {p}.raw_lines as lines join {p}.ledger as own using (file_id) "
    "join main.ledger as coordinator on coordinator.source = 'receipts' "
    "and coordinator.status = 'current' and coordinator.path = own.path "
    "and coordinator.sha256 = own.sha256"
)


@contextmanager
def partition_lines_view(
    con: duckdb.DuckDBPyConnection, aliases: list[str], view: str = "raw_lines"
) -> Iterator[None]:
    """`view` (raw_lines) on this connection reads the partitions' lines while the block runs."""
    # the view's name is a constant of this package, never config text
    con.execute(f"create or replace temp view {view} as {union_of(aliases, PARTITION_LINES)}")
    try:
        yield
    finally:
        con.execute(f"drop view if exists temp.{view}")
