"""A hand-built warehouse for the instruments tests: three store-week markets, four products,
two firms, plus a fringe row per market (see the table in `PRODUCT_MARKETS`)."""

from __future__ import annotations

from datetime import date
from pathlib import Path
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext

WEEK = date(2024, 1, 1)

# product -> (firm, roast_level, organic)
PRODUCTS = {
    "p1": ("F1", 1, True),
    "p2": ("F1", 3, False),
    "p3": ("F2", 2, False),
    "p4": ("F2", 5, True),
}
# (store, product, price): A = S1 sells all four, B = S2 sells p1-p3, C = S3 sells p1 and p3.
PRODUCT_MARKETS = [
    ("S1", "p1", 4.0),
    ("S1", "p2", 3.0),
    ("S1", "p3", 2.0),
    ("S1", "p4", 7.0),
    ("S2", "p1", 5.0),
    ("S2", "p2", 3.5),
    ("S2", "p3", 2.5),
    ("S3", "p1", 6.0),
    ("S3", "p3", 4.0),
]
STORE_REGIONS = {"S1": "north", "S2": "north", "S3": "south"}
FRINGE_PRICE = 1.0


def market_id(store: str, period: date = WEEK) -> str:
    """The market id the market build gives a store-period."""
    return f"{store}/{period.isoformat()}"


A, B, C = market_id("S1"), market_id("S2"), market_id("S3")


def fixture_config(
    tmp_path: Path, instruments: dict[str, Any], geography: str = "store"
) -> ProjectConfig:
    """A config with weekly markets of `geography` and the given [instruments] section."""
    raw = {
        "sources": {
            "receipts": {
                "files": ["receipts.csv"],
                "columns": {
                    "receipt": "r",
                    "store": "s",
                    "sold_at": "t",
                    "sku": "k",
                    "quantity": "q",
                    "amount": "a",
                },
            },
            "catalogue": {"files": ["catalogue.csv"], "columns": {"sku": "k", "category": "c"}},
            "stores": {"files": ["stores.csv"], "columns": {"store": "s", "region": "region"}},
        },
        "markets": {"geography": geography, "period": "week", "categories": ["coffee"]},
        "products": {
            "keys": ["roaster"],
            "characteristics": ["roast_level", "organic"],
        },
        "market_size": {
            "visits": {"method": "visits", "units_per_visit": 1.0},
            "peak": {"method": "peak_multiple", "multiple": 3.0},
        },
        "instruments": instruments,
    }
    return ProjectConfig.model_validate(raw, context={"base_dir": tmp_path})


def create_market_tables(
    con: duckdb.DuckDBPyConnection,
    extra_rows: list[tuple[str, date, str, float]] = (),
    zero_share_rows: list[tuple[str, date, str, float]] = (),
) -> None:
    """`stores`, `market_products` and `shares` as the ingest and market build would leave them.

    `extra_rows` adds (store, period_start, product, price) product-markets; `zero_share_rows`
    likewise, on the shelf without sales (price: the shelf price; zero_shares = 'keep')."""
    con.execute("create table stores (store varchar, region varchar)")
    con.executemany("insert into stores values (?, ?)", list(STORE_REGIONS.items()))
    con.execute(
        """
        create table market_products (
            market varchar, geography varchar, period_start date, product varchar,
            firm varchar, nest varchar, roast_level integer, organic boolean,
            units double, price double, is_fringe boolean, is_zero_share boolean
        )
        """
    )
    rows = [(store, WEEK, product, price) for store, product, price in PRODUCT_MARKETS]
    rows += list(extra_rows)
    sold = [(row, 10, False) for row in rows] + [(row, 0, True) for row in zero_share_rows]
    for (store, period, product, price), units, zero in sold:
        firm, roast, organic = PRODUCTS[product]
        con.execute(
            "insert into market_products values (?, ?, ?, ?, ?, 'bag', ?, ?, ?, ?, false, ?)",
            [
                market_id(store, period),
                store,
                period,
                product,
                firm,
                roast,
                organic,
                units,
                price,
                zero,
            ],
        )
    for store, period in sorted({(store, period) for (store, period, _, _), _, _ in sold}):
        con.execute(
            "insert into market_products values (?, ?, ?, 'fringe', null, null, null, null,"
            " 3, ?, true, false)",
            [market_id(store, period), store, period, FRINGE_PRICE],
        )
    con.execute(
        """
        create table shares as
        select assumption, market, geography, period_start, product, firm, nest, roast_level,
            organic, units, price, 0.01 as share, -3.0 as log_share_ratio, is_fringe
        from market_products, (values ('visits'), ('peak')) a(assumption)
        """
    )


def create_cost_shifters(con: duckdb.DuckDBPyConnection, with_product: bool = False) -> None:
    """`cost_shifters` with daily rows: two F1 days and one F2 day in the week, one F1 day after."""
    if with_product:
        con.execute("create table cost_shifters (period date, product varchar, bean_cost double)")
        con.executemany(
            "insert into cost_shifters values (?, ?, ?)",
            [(WEEK, "p1", 2.0), (WEEK, "p3", 4.0)],
        )
        return
    con.execute("create table cost_shifters (period date, firm varchar, green_index double)")
    con.executemany(
        "insert into cost_shifters values (?, ?, ?)",
        [
            (date(2024, 1, 1), "F1", 1.0),
            (date(2024, 1, 3), "F1", 2.0),
            (date(2024, 1, 2), "F2", 3.0),
            (date(2024, 1, 8), "F1", 10.0),
        ],
    )


def run_instrument_stages(ctx: BuildContext, through: str = "share_table") -> None:
    """Run the instrument stages in order up to and including `through`."""
    from demandprep.instruments.stages import INSTRUMENT_STAGES

    for stage in INSTRUMENT_STAGES:
        stage.run(ctx)
        if stage.name == through:
            return


def instrument_value(con: duckdb.DuckDBPyConnection, market: str, product: str, column: str) -> Any:
    """One value of the instruments table (column names come from the test, not the user)."""
    row = con.execute(
        f'select "{column}" from instruments where market = ? and product = ?',  # noqa: S608
        [market, product],
    ).fetchone()
    assert row is not None, (market, product)
    return row[0]
