"""Which partitions a build has, and where each one keeps its warehouse and summaries."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import duckdb

from demandprep.config import ProjectConfig
from demandprep.errors import UserError
from demandprep.market.settings import table_columns
from demandprep.sqlfiles import quote_identifier

SUMMARY_FILES = ("market_store_visits", "market_sku_sales")
# the partition of stores without a value in the partitioning column (or without a stores row)
NO_VALUE = "no value"


@dataclass(frozen=True)
class Partition:
    """One value of the partitioning column and the stores whose lines it builds."""

    key: str | None
    stores: tuple[str, ...]

    @property
    def name(self) -> str:
        """A folder name that does not depend on the value's spelling (values are free text)."""
        label = NO_VALUE if self.key is None else f"value:{self.key}"
        return "partition-" + hashlib.sha256(label.encode()).hexdigest()[:16]

    @property
    def label(self) -> str:
        """The value as shown in logs and docs."""
        return NO_VALUE if self.key is None else self.key


def partition_folder(config: ProjectConfig, partition: Partition) -> Path:
    """The partition's own folder under `partitioning.root`."""
    root = config.partitioning.root
    if not root.is_absolute() and config.config_path is not None:
        # the default root, when the config has no [partitioning] table to resolve it
        root = config.config_path.parent / root
    return root / partition.name


def summary_path(config: ProjectConfig, partition: Partition, summary: str) -> Path:
    """Where the partition publishes one period summary as Parquet."""
    return partition_folder(config, partition) / f"{summary}.parquet"


def partition_config(config: ProjectConfig, partition: Partition) -> ProjectConfig:
    """The project's config with the warehouse moved into the partition's folder."""
    folder = partition_folder(config, partition)
    warehouse = config.warehouse.model_copy(
        update={"path": folder / "warehouse.duckdb", "temp_directory": folder / "tmp"}
    )
    return config.model_copy(update={"warehouse": warehouse})


def plan_partitions(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[Partition]:
    """The partitions of the coordinator's receipt lines, by the stores column named in config."""
    require_partition_key(config)
    column = config.partitioning.by
    check_partitioning(con, config)
    # the column was checked against the stores table's real columns just above
    rows = con.execute(
        "with line_stores as (select distinct store from raw_lines), "
        f"keyed as (select store, {quote_identifier(column)}::varchar as key from stores) "  # noqa: S608
        "select keyed.key, list(line_stores.store order by line_stores.store) "
        "from line_stores left join keyed using (store) group by keyed.key order by keyed.key"
    ).fetchall()
    return [Partition(key, tuple(stores)) for key, stores in rows]


def require_partition_key(config: ProjectConfig) -> None:
    """Refuse a partitioned build of a config that names no partition key."""
    if config.partitioning.by is None:
        raise UserError(
            f"{config.config_path}: partitioning.by is not set, so there is nothing to partition.",
            'name a stores column (e.g. by = "region") under [partitioning], or use '
            "`demandprep run`.",
        )


def check_visits_stay_in_stores(config: ProjectConfig) -> None:
    """Refuse receipt ids unique only in the chain: a visit could then span partitions."""
    if config.markets.receipt_ids_unique_per == "chain":
        raise UserError(
            f"{config.config_path}: key 'partitioning.by' needs receipt ids unique per store or "
            "store-day, but markets.receipt_ids_unique_per = 'chain' lets a visit span partitions.",
            "set receipt_ids_unique_per to 'store' or 'store_day', or leave partitioning.by unset.",
        )


def check_partitioning(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Refuse a partitioning that could split a market or a visit between partitions."""
    column = config.partitioning.by
    key = "key 'partitioning.by'"
    if column not in table_columns(con, "stores"):
        raise UserError(
            f"{config.config_path}: {key} names {column!r}, which is not a stores column.",
            f"use one of: {', '.join(table_columns(con, 'stores'))}.",
        )
    check_visits_stay_in_stores(config)
    geography = config.markets.geography
    if geography in ("store", column) or geography not in table_columns(con, "stores"):
        return  # an unknown geography column is the market settings' to report
    # both names were checked: geography by the market settings, column just above
    split = con.execute(
        f"select min({quote_identifier(geography)}) from stores "  # noqa: S608
        f"group by {quote_identifier(geography)} "
        f"having count(distinct {quote_identifier(column)}) > 1 order by 1 limit 1"
    ).fetchone()
    if split is not None:
        raise UserError(
            f"{config.config_path}: {key} = {column!r} splits the market geography "
            f"{split[0]!r} between partitions.",
            "partition by a stores column that holds whole geographies (e.g. a coarser region).",
        )
