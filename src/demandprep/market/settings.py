"""Config choices of the market build: checked against the warehouse, written where SQL reads them.

The SQL files of the build are static. A config choice reaches them in one of two ways:

- scalars (period, week start, unit, universe rules, zero-share policy) as bound parameters,
  from `market_params`;
- column names and lists (product keys, firm, nest, pack size and unit, geography, population
  columns, categories, assumptions) as rows of small settings tables, written by
  `write_settings`. The SQL unpivots the catalogue and the stores into (row, column_name, value)
  cells and joins these rows on `column_name`, so no identifier is ever pasted into SQL text.

Characteristics keep their catalogue types: SQL selects them with
`columns($characteristic_columns)`, a bound list of names that DuckDB resolves against the table
itself, and carries them on with `attributes.* exclude (product, firm, nest)`. Every name is
first checked here against the real columns, so a typo stops the build with the key and the
columns on offer.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.errors import UserError

WEEKDAY_NUMBERS = {
    "monday": 1,
    "tuesday": 2,
    "wednesday": 3,
    "thursday": 4,
    "friday": 5,
    "saturday": 6,
    "sunday": 7,
}

# Columns of the market tables; a characteristic may not take one of these names.
RESERVED_COLUMNS = frozenset(
    {
        "assumption",
        "market",
        "geography",
        "period_start",
        "product",
        "firm",
        "nest",
        "units",
        "equivalent_quantity",
        "net_revenue",
        "gross_revenue",
        "price",
        "gross_price",
        "promo_share",
        "share",
        "outside_share",
        "log_share_ratio",
        "within_nest_share",
        "log_within_nest_share",
        "market_size",
        "is_fringe",
        "is_zero_share",
        "volume",
        "volume_share",
        "market_presence",
        "kept",
        "rank",
        "sku",
    }
)

# Columns of the products table besides the key parts (firm and nest may be key parts).
PRODUCT_TABLE_COLUMNS = frozenset(
    {"product", "display_name", "sku_count", "skus", "kept", "is_fringe"}
)

SETTINGS_DDL = """
create or replace table market_settings_categories (category varchar not null);
create or replace table market_settings_catalogue_columns (
    role varchar not null, position integer not null, column_name varchar not null
);
create or replace table market_settings_store_columns (
    role varchar not null, column_name varchar not null
);
create or replace table market_settings_assumptions (
    assumption varchar not null,
    method varchar not null,
    units_per_visit double,
    units_per_person_per_day double,
    population_column varchar,
    multiple double,
);
"""


@dataclass(frozen=True)
class ColumnRole:
    """One catalogue column the build reads, with the role it plays (key, firm, nest, ...)."""

    role: str
    position: int
    column_name: str
    config_key: str


def table_columns(con: duckdb.DuckDBPyConnection, table: str) -> list[str]:
    """The column names of a warehouse table, in order; empty when the table does not exist."""
    rows = con.execute(
        "select column_name from information_schema.columns "
        "where table_name = $table and table_schema = current_schema() order by ordinal_position",
        {"table": table},
    ).fetchall()
    return [row[0] for row in rows]


def catalogue_roles(config: ProjectConfig) -> list[ColumnRole]:
    """Every catalogue column the build reads, from `products` in the config."""
    products = config.products
    roles = [
        ColumnRole("key", position, name, "products.keys")
        for position, name in enumerate(products.keys, start=1)
    ]
    roles.append(ColumnRole("firm", 1, products.firm, "products.firm"))
    if products.nest is not None:
        roles.append(ColumnRole("nest", 1, products.nest, "products.nest"))
    unit = products.equivalent_unit
    if unit.kind == "weight":
        roles.append(
            ColumnRole("pack_size", 1, unit.size_column, "products.equivalent_unit.size_column")
        )
        roles.append(
            ColumnRole("pack_unit", 1, unit.unit_column, "products.equivalent_unit.unit_column")
        )
    return roles


def check_inputs(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Stop with a clear message when a table or a configured column is missing."""
    _check_key_names(config)
    for table in ("raw_lines", "catalogue", "stores"):
        if not table_columns(con, table):
            raise UserError(
                f"the warehouse has no {table!r} table.", "run `demandprep ingest` first."
            )
    catalogue = table_columns(con, "catalogue")
    for role in catalogue_roles(config):
        _require_column(role.column_name, catalogue, role.config_key, "catalogue")
    for name in config.products.characteristics:
        _require_column(name, catalogue, "products.characteristics", "catalogue")
        if name in RESERVED_COLUMNS:
            raise UserError(
                f"config key 'products.characteristics': {name!r} is a column name of the "
                "share table itself.",
                "rename the column in [sources.catalogue.columns].",
            )
    stores = table_columns(con, "stores")
    _require_column(config.markets.geography, stores, "markets.geography", "stores")
    for name, assumption in config.market_size.items():
        if assumption.method == "population":
            key = f"market_size.{name}.population_column"
            _require_column(assumption.population_column, stores, key, "stores")
    _check_unique(con, "catalogue", "sku")
    _check_unique(con, "stores", "store")
    _check_optional_inputs(con, config)


def _check_key_names(config: ProjectConfig) -> None:
    # each key part is a column of products.parquet beside these of our own
    clash = [name for name in config.products.keys if name in PRODUCT_TABLE_COLUMNS]
    if clash:
        raise UserError(
            f"config key 'products.keys': {clash[0]!r} is a column name of the products table "
            "itself.",
            "rename the column in [sources.catalogue.columns].",
        )


def _require_column(name: str, columns: list[str], key: str, table: str) -> None:
    if name not in columns:
        raise UserError(
            f"config key {key!r}: column {name!r} is not in the {table} table "
            f"(columns: {', '.join(columns)}).",
            f"map it under [sources.{table}.columns] and ingest again.",
        )


def _check_unique(con: duckdb.DuckDBPyConnection, table: str, column: str) -> None:
    # the table and column names are ours (contract tables), not the user's
    duplicated = con.execute(
        f"select {column} from {table} group by all having count(*) > 1 order by 1 limit 3"  # noqa: S608
    ).fetchall()
    if duplicated:
        shown = ", ".join(str(row[0]) for row in duplicated)
        raise UserError(
            f"the {table} table has more than one row for {column} {shown}.",
            f"keep one row per {column} in the {table} file.",
        )


def _check_optional_inputs(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    if config.shares.zero_shares != "drop" and not table_columns(con, "shelf_prices"):
        raise UserError(
            f"config key 'shares.zero_shares' = {config.shares.zero_shares!r} needs the "
            "shelf-price "
            "file, which tells which products were on the shelf.",
            "configure [sources.shelf_prices] and ingest, or set zero_shares = 'drop'.",
        )
    tables = [name for name, a in config.market_size.items() if a.method == "table"]
    if tables and not table_columns(con, "market_size_table"):
        raise UserError(
            f"config key 'market_size.{tables[0]}' uses method 'table' but the warehouse has no "
            "market_size_table.",
            "configure [sources.market_sizes] and ingest.",
        )


def write_settings(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Write the settings tables the static SQL reads (categories, columns, assumptions)."""
    con.execute(SETTINGS_DDL)
    con.executemany(
        "insert into market_settings_categories values (?)",
        [[category] for category in config.markets.categories],
    )
    con.executemany(
        "insert into market_settings_catalogue_columns values (?, ?, ?)",
        [[r.role, r.position, r.column_name] for r in catalogue_roles(config)],
    )
    con.execute(
        "insert into market_settings_store_columns values ('geography', ?)",
        [config.markets.geography],
    )
    con.executemany(
        "insert into market_settings_assumptions values (?, ?, ?, ?, ?, ?)",
        [
            [
                name,
                a.method,
                a.units_per_visit,
                a.units_per_person_per_day,
                a.population_column if a.method == "population" else None,
                a.multiple,
            ]
            for name, a in sorted(config.market_size.items())
        ],
    )


def market_params(config: ProjectConfig) -> dict[str, Any]:
    """The bound parameters of the market SQL files, from the config."""
    markets, products, shares = config.markets, config.products, config.shares
    universe, unit = products.universe, products.equivalent_unit
    return {
        "period": markets.period,
        "week_start": WEEKDAY_NUMBERS[markets.week_starts_on],
        "receipt_ids_unique_per": markets.receipt_ids_unique_per,
        "unit_kind": unit.kind,
        "unit_grams": unit.grams,
        "returns_in_demand": config.sources.receipts.returns_in_demand,
        "top_n": universe.top_n,
        "min_volume_share": universe.min_volume_share,
        "min_market_presence": universe.min_market_presence,
        "rest": universe.rest,
        "zero_shares": shares.zero_shares,
        # 'sku' first so the list is never empty (DuckDB refuses an empty COLUMNS list)
        "characteristic_columns": ["sku", *products.characteristics],
        "product_keys": list(products.keys),
        # characteristics and firm/nest a key part already carries are not repeated
        "product_characteristics": [
            "product",
            *(c for c in products.characteristics if c not in products.keys),
        ],
        "product_owners": ["product", *(c for c in ("firm", "nest") if c not in products.keys)],
    }
