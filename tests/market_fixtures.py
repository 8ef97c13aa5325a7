"""Hand-built warehouses for the market-build tests: contract tables created directly in DuckDB.

`tiny_world()` is a few stores, SKUs and receipts whose shares can be worked out by hand; tests
change it with `dataclasses.replace` or by editing its row lists. `market_config(**sections)` is a
config for it, with any section overridden.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from datetime import date, datetime
from pathlib import Path
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext

RAW_LINES_DDL = """
create table raw_lines (
    file_id varchar not null, line_no bigint not null, receipt varchar not null, line bigint,
    store varchar not null, sold_at timestamp not null, sku varchar not null,
    quantity double not null, amount double not null, discount double not null,
    card varchar, line_kind varchar not null
)
"""

CATALOGUE_COLUMNS = (
    "sku",
    "category",
    "roaster",
    "firm",
    "format",
    "pack_size",
    "pack_unit",
    "pack_grams",
    "roast_level",
    "organic",
)
CATALOGUE_DDL = """
create table catalogue (
    sku varchar, category varchar, roaster varchar, firm varchar, format varchar,
    pack_size double, pack_unit varchar, pack_grams bigint, roast_level bigint, organic bigint
)
"""
STORES_DDL = "create table stores (store varchar, region varchar, chain varchar, population double)"
SHELF_DDL = (
    "create table shelf_prices (store varchar, date date, sku varchar, price double, promo boolean)"
)
SIZE_DDL = "create table market_size_table (geography varchar, period date, size double)"

# sku, category, roaster, firm, format, pack_size, pack_unit, pack_grams, roast_level, organic
CATALOGUE = [
    ("A1", "coffee", "Alder", "Firm1", "beans", 250.0, "g", 250, 3, 0),
    ("A2", "coffee", "Alder", "Firm1", "beans", 250.0, "g", 250, 3, 0),
    ("B1", "coffee", "Birch", "Firm2", "ground", 500.0, "g", 500, 4, 1),
    ("C1", "coffee", "Cedar", "Firm2", "capsules", 100.0, "g", 100, 5, 0),
    ("L1", "coffee_bulk", "Loose", "Firm3", "loose", 1.0, "kg", 1000, 3, 0),
    ("G1", "grocery", None, "Grocer", None, 1.0, "kg", None, None, None),
]

# store, region, chain, population
STORES = [
    ("S1", "north", "chainA", 1000.0),
    ("S2", "north", "chainA", 500.0),
    ("S3", "south", "chainA", 2000.0),
]

WEEK1 = date(2024, 1, 1)  # a Monday
WEEK2 = date(2024, 1, 8)


@dataclass(frozen=True)
class Line:
    """One receipt line of the fixture (amount is the gross line value)."""

    receipt: str
    store: str
    day: date
    sku: str
    quantity: float
    amount: float
    discount: float = 0.0
    kind: str = "sale"


def _default_lines() -> list[Line]:
    d1, d2 = WEEK1, date(2024, 1, 3)
    w2 = WEEK2
    return [
        # store S1, week 1: five visits
        Line("r1", "S1", d1, "A1", 2, 10.0),
        Line("r1", "S1", d1, "G1", 1, 3.0),
        Line("r2", "S1", d1, "A2", 1, 5.0, 1.0),
        Line("r3", "S1", d2, "B1", 1, 8.0),
        Line("r4", "S1", d2, "G1", 1, 2.0),
        Line("r5", "S1", d2, "C1", 3, 9.0),
        Line("r5", "S1", d2, "C1", 1, 3.0),  # a voided re-scan ...
        Line("r5", "S1", d2, "C1", -1, -3.0, kind="void"),  # ... cancelled
        # store S2, week 1: three visits
        Line("r6", "S2", d1, "B1", 2, 16.0, 2.0),
        Line("r7", "S2", d1, "G1", 2, 4.0),
        Line("r8", "S2", d2, "A1", 1, 5.0),
        Line("r8", "S2", d2, "G1", 1, 5.0, kind="return"),
        # store S1, week 2: four visits
        Line("r9", "S1", w2, "A1", 1, 5.0),
        Line("r10", "S1", w2, "B1", 1, 8.0),
        Line("r11", "S1", w2, "G1", 1, 1.0),
        Line("r12", "S1", w2, "L1", 0.4, 6.0),
        # store S3, week 2: two visits
        Line("r13", "S3", w2, "C1", 2, 6.0),
        Line("r14", "S3", w2, "G1", 1, 1.0),
    ]


@dataclass
class TinyWorld:
    """The rows of each contract table of the fixture warehouse."""

    lines: list[Line] = field(default_factory=_default_lines)
    catalogue: list[tuple] = field(default_factory=lambda: list(CATALOGUE))
    stores: list[tuple] = field(default_factory=lambda: list(STORES))
    shelf_prices: list[tuple] | None = None  # (store, date, sku, price, promo)
    size_table: list[tuple] | None = None  # (geography, period, size)


def tiny_world() -> TinyWorld:
    """A fresh copy of the default fixture rows."""
    return TinyWorld()


def load_world(con: duckdb.DuckDBPyConnection, world: TinyWorld) -> None:
    """Create the contract tables in `con` and fill them with the world's rows."""
    con.execute(RAW_LINES_DDL)
    rows = [
        (
            "f1",
            n,
            line.receipt,
            n,
            line.store,
            datetime.combine(line.day, datetime.min.time()).replace(hour=10, minute=n % 60),
            line.sku,
            float(line.quantity),
            float(line.amount),
            float(line.discount),
            None,
            line.kind,
        )
        for n, line in enumerate(world.lines, start=1)
    ]
    if rows:
        con.executemany("insert into raw_lines values (?,?,?,?,?,?,?,?,?,?,?,?)", rows)
    con.execute(CATALOGUE_DDL)
    con.executemany("insert into catalogue values (?,?,?,?,?,?,?,?,?,?)", world.catalogue)
    con.execute(STORES_DDL)
    con.executemany("insert into stores values (?,?,?,?)", world.stores)
    if world.shelf_prices is not None:
        con.execute(SHELF_DDL)
        con.executemany("insert into shelf_prices values (?,?,?,?,?)", world.shelf_prices)
    if world.size_table is not None:
        con.execute(SIZE_DDL)
        con.executemany("insert into market_size_table values (?,?,?)", world.size_table)


BASE_CONFIG: dict[str, Any] = {
    "sources": {
        "receipts": {
            "files": ["receipts/*.csv"],
            "columns": {
                "receipt": "ticket",
                "store": "shop",
                "sold_at": "at",
                "sku": "item",
                "quantity": "qty",
                "amount": "value",
                "discount": "disc",
                "line_kind": "kind",
            },
        },
        "catalogue": {"files": ["catalogue.csv"], "columns": {c: c for c in CATALOGUE_COLUMNS}},
        "stores": {
            "files": ["stores.csv"],
            "columns": {
                "store": "store",
                "region": "region",
                "chain": "chain",
                "population": "pop",
            },
        },
    },
    "markets": {"geography": "store", "period": "week", "categories": ["coffee"]},
    "products": {
        "keys": ["roaster", "format", "pack_grams"],
        "firm": "firm",
        "nest": "format",
        "characteristics": ["roast_level", "organic", "pack_grams"],
        "equivalent_unit": {"kind": "item"},
    },
    "market_size": {"visits": {"method": "visits", "units_per_visit": 2.0}},
    "shares": {"outside_share_floor": 0.05, "zero_shares": "drop"},
}


def market_config(tmp_path: Path | None = None, **sections: Any) -> ProjectConfig:
    """A config for the fixture world; each keyword replaces one top-level section."""
    raw = copy.deepcopy(BASE_CONFIG)
    raw.update(copy.deepcopy(sections))
    base = tmp_path or Path.cwd()
    return ProjectConfig.model_validate(raw, context={"base_dir": base})


def build_context(world: TinyWorld, config: ProjectConfig) -> BuildContext:
    """An in-memory warehouse holding `world`, wrapped in a build context for `config`."""
    con = duckdb.connect()
    load_world(con, world)
    return BuildContext(con=con, config=config)


# --- demo worlds ----------------------------------------------------------------------------

DEMO_TEMPLATE = (
    Path(__file__).resolve().parents[1] / "src" / "demandprep" / "templates" / "demo.toml"
)


# products as the demo world's tests key them: one product per roaster, format and pack size
DEMO_PRODUCTS = {
    "keys": ["roaster", "format", "pack_grams"],
    "firm": "firm",
    "nest": "format",
    "characteristics": ["roast_level", "organic", "pack_grams"],
    "equivalent_unit": {"kind": "item"},
}


def demo_config(world_dir: Path, **sections: Any) -> ProjectConfig:
    """The demo template's config for a generated world folder, with sections replaced."""
    import tomllib

    from demandprep.config import parse_config

    raw = tomllib.loads(DEMO_TEMPLATE.read_text(encoding="utf-8"))
    raw.update(copy.deepcopy(sections))
    return parse_config(raw, world_dir / "demandprep.toml")


DEMO_LOAD_SQL = """
create table raw_lines as
select
    'demo' as file_id,
    row_number() over (order by filename, ticket_no, row_no) as line_no,
    ticket_no as receipt,
    row_no as line,
    shop_id as store,
    scanned_at::timestamp as sold_at,
    item_code as sku,
    qty::double as quantity,
    line_value::double as amount,
    coalesce(discount_value, 0)::double as discount,
    loyalty_card::varchar as card,
    line_type as line_kind,
from read_csv($receipts, filename = true, header = true, auto_detect = false,
    columns = {
        'ticket_no': 'VARCHAR', 'row_no': 'BIGINT', 'shop_id': 'VARCHAR',
        'scanned_at': 'TIMESTAMP', 'item_code': 'VARCHAR', 'qty': 'DOUBLE',
        'line_value': 'DOUBLE', 'loyalty_card': 'VARCHAR', 'discount_value': 'DOUBLE',
        'line_type': 'VARCHAR'
    });
create table catalogue as
select item_code as sku, category, roaster, firm, format, pack_size, pack_unit, pack_grams,
    roast_level, organic
from read_csv($catalogue);
create table stores as
select shop_id as store, region, chain, catchment_population as population
from read_csv($stores);
create table shelf_prices as
select shop_id as store, week_start::date as date, item_code as sku, shelf_price::double as price,
    on_promo::boolean as promo
from read_csv($shelf_prices);
create table market_size_table as
select area as geography, period_start::date as period, potential_units::double as size
from read_csv($market_sizes);
"""


def load_demo_csvs(con: duckdb.DuckDBPyConnection, world_dir: Path) -> None:
    """Load a fault-free generated world's CSVs into the contract tables with plain read_csv.

    A fast stand-in for the ingest (which the end-to-end tests use); it assumes clean files.
    """
    paths = {
        "receipts": str(world_dir / "receipts" / "*" / "receipts_*.csv.gz"),
        "catalogue": str(world_dir / "catalogue.csv"),
        "stores": str(world_dir / "stores.csv"),
        "shelf_prices": str(world_dir / "shelf_prices.csv"),
        "market_sizes": str(world_dir / "market_sizes.csv"),
    }
    for statement in DEMO_LOAD_SQL.split(";"):
        used = {k: v for k, v in paths.items() if f"${k}" in statement}
        if statement.strip():
            con.execute(statement, used)
