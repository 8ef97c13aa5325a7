"""Hand-built warehouse tables for the choice-build tests, written straight into DuckDB.

`ChoiceWorld` holds the contract tables (raw_lines, catalogue, stores, households, shelf_prices,
product_universe) as Python rows; `build(config_overrides)` writes them to a fresh in-memory
warehouse, runs the choice stages and returns the context, so each test can state its data
and the values it expects side by side.
"""

from __future__ import annotations

import copy
import os
from dataclasses import dataclass, field
from datetime import date, datetime
from pathlib import Path
from typing import Any

import duckdb
import polars as pl

from demandprep.choices.pseudonyms import occasion_id
from demandprep.choices.stages import CHOICE_STAGES
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.stage import run_stage

KEY_ENV = "DEMANDPREP_PSEUDONYM_KEY"
TEST_KEY = "test-key-for-choice-fixtures-0123456789"

BASE_CONFIG: dict[str, Any] = {
    "sources": {
        "receipts": {
            "files": ["receipts.csv"],
            "columns": {
                "receipt": "r",
                "store": "s",
                "sold_at": "t",
                "sku": "i",
                "quantity": "q",
                "amount": "a",
                "card": "c",
            },
        },
        "catalogue": {"files": ["catalogue.csv"], "columns": {"sku": "i", "category": "k"}},
        "stores": {"files": ["stores.csv"], "columns": {"store": "s"}},
    },
    "markets": {"geography": "store", "period": "week", "categories": ["tea"]},
    "products": {"keys": ["brand"], "firm": "firm", "characteristics": ["strength"]},
    "market_size": {"visits": {"method": "visits", "units_per_visit": 1.0}},
    "choices": {
        "occasions": "category_visits",
        "loyalty_smoothing": 0.5,
        "loyalty_burn_in_days": 0,
        "holdout_fraction": 0.5,
    },
}


def make_config(overrides: dict[str, Any] | None = None) -> ProjectConfig:
    """A config for the hand-built tables; `overrides` is merged section by section."""
    raw = copy.deepcopy(BASE_CONFIG)
    for section, values in (overrides or {}).items():
        if isinstance(values, dict) and isinstance(raw.get(section), dict):
            raw[section] = {**raw[section], **values}
        else:
            raw[section] = values
    return ProjectConfig.model_validate(raw, context={"base_dir": Path("/nonexistent")})


@dataclass
class ChoiceWorld:
    """Rows of the contract tables; helpers add receipts line by line."""

    catalogue: list[dict] = field(default_factory=list)
    stores: list[dict] = field(default_factory=list)
    households: list[dict] | None = field(default_factory=list)
    shelf: list[dict] | None = field(default_factory=list)
    universe: list[dict] | None = None
    lines: list[dict] = field(default_factory=list)
    _receipts: int = 0

    def product(self, sku: str, brand: str, strength: int, firm: str = "F", category="tea"):
        """Add a catalogue SKU."""
        self.catalogue.append(
            {"sku": sku, "category": category, "brand": brand, "firm": firm, "strength": strength}
        )

    def store(self, store: str, region: str = "north") -> None:
        """Add a store."""
        self.stores.append({"store": store, "region": region})

    def household(self, card: str, income: str = "mid") -> None:
        """Add a households row."""
        assert self.households is not None
        self.households.append({"card": card, "income": income})

    def shelf_price(self, store: str, day: date, sku: str, price: float, promo=False) -> None:
        """Add a shelf-price row (day = period start)."""
        assert self.shelf is not None
        self.shelf.append({"store": store, "date": day, "sku": sku, "price": price, "promo": promo})

    def visit(
        self,
        store: str,
        at: datetime,
        card: str | None,
        items: list[tuple[str, float, float]] | None = None,
        receipt: str | None = None,
        discount: float = 0.0,
    ) -> str:
        """Add one receipt: items are (sku, quantity, amount); a grocery line if none given.

        Returns the visit's occasion id under the key set in the environment now.
        """
        self._receipts += 1
        receipt = receipt or f"R{self._receipts:05d}"
        for n, (sku, quantity, amount) in enumerate(items or [("GROCERY", 1, 1.0)], start=1):
            self.lines.append(
                {
                    "file_id": "f1",
                    "line_no": len(self.lines) + 1,
                    "receipt": receipt,
                    "line": n,
                    "store": store,
                    "sold_at": at,
                    "sku": sku,
                    "quantity": float(quantity),
                    "amount": float(amount),
                    "discount": discount if sku != "GROCERY" else 0.0,
                    "card": card,
                    "line_kind": "sale",
                }
            )
        # the occasion id the build gives this visit (a keyed hash of store, day and receipt)
        key = os.environ.get(KEY_ENV, "").encode("utf-8")
        return occasion_id(key, store, receipt, f"{at:%Y-%m-%d}")

    def write(self, con: duckdb.DuckDBPyConnection) -> None:
        """Write every table into the warehouse with the contract's column types."""
        _write(con, "raw_lines", self.lines, RAW_LINES_SCHEMA)
        self.catalogue.append(
            {"sku": "GROCERY", "category": "bread", "brand": "X", "firm": "X", "strength": 0}
        )
        _write(con, "catalogue", self.catalogue, None)
        self.catalogue.pop()
        _write(con, "stores", self.stores, None)
        if self.households is not None:
            _write(con, "households", self.households, {"card": pl.String, "income": pl.String})
        if self.shelf is not None:
            _write(con, "shelf_prices", self.shelf, SHELF_SCHEMA)
        if self.universe is not None:
            _write(
                con, "product_universe", self.universe, {"product": pl.String, "kept": pl.Boolean}
            )

    def build(
        self, overrides: dict[str, Any] | None = None, con: duckdb.DuckDBPyConnection | None = None
    ) -> BuildContext:
        """Write the tables to a new in-memory warehouse and run every choice stage."""
        # like the warehouse: DuckDB may reorder rows unless a stage asks otherwise
        con = con or duckdb.connect(config={"preserve_insertion_order": False, "threads": 2})
        self.write(con)
        ctx = BuildContext(con=con, config=make_config(overrides))
        for stage in CHOICE_STAGES:
            run_stage(stage, ctx)
        return ctx


RAW_LINES_SCHEMA = {
    "file_id": pl.String,
    "line_no": pl.Int64,
    "receipt": pl.String,
    "line": pl.Int64,
    "store": pl.String,
    "sold_at": pl.Datetime("us"),
    "sku": pl.String,
    "quantity": pl.Float64,
    "amount": pl.Float64,
    "discount": pl.Float64,
    "card": pl.String,
    "line_kind": pl.String,
}
SHELF_SCHEMA = {
    "store": pl.String,
    "date": pl.Date,
    "sku": pl.String,
    "price": pl.Float64,
    "promo": pl.Boolean,
}


def _write(con, table: str, rows: list[dict], schema: dict | None) -> None:
    frame = pl.DataFrame(rows, schema=schema, orient="row") if schema else pl.DataFrame(rows)
    con.register("fixture_rows", frame.to_arrow())
    con.execute(f"create or replace table {table} as select * from fixture_rows")
    con.unregister("fixture_rows")


def choices_frame(ctx: BuildContext) -> pl.DataFrame:
    """The built choices table, sorted by occasion and alternative."""
    frame = pl.from_arrow(ctx.con.sql("select * from choices").to_arrow_table())
    assert isinstance(frame, pl.DataFrame)
    return frame.sort("occasion", "alternative")


def row(frame: pl.DataFrame, occasion: str, alternative: str) -> dict:
    """The one row of an occasion and alternative, as a dict."""
    found = frame.filter((pl.col("occasion") == occasion) & (pl.col("alternative") == alternative))
    assert found.height == 1, f"{occasion}/{alternative}: {found.height} rows"
    return found.to_dicts()[0]


def load_sources_plainly(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    """Load every configured source with plain DuckDB readers, mapped to our column names.

    A stand-in for the ingest step when it is not importable: no quarantine and no ledger, only
    the contract tables the choice and market builds read.
    """
    receipts = config.sources.receipts
    mapping = receipts.columns
    lines = _read_csv(con, receipts.resolved_files(), all_varchar=True)
    con.execute(
        f"""
        create or replace table raw_lines as
        select
            'plain' as file_id,
            row_number() over () as line_no,
            {_q(mapping["receipt"])} as receipt,
            try_cast({_q(mapping["line"])} as bigint) as line,
            {_q(mapping["store"])} as store,
            strptime({_q(mapping["sold_at"])}, '{receipts.timestamp_format}') as sold_at,
            {_q(mapping["sku"])} as sku,
            cast({_q(mapping["quantity"])} as double) as quantity,
            cast({_q(mapping["amount"])} as double) as amount,
            coalesce(try_cast({_q(mapping["discount"])} as double), 0) as discount,
            nullif({_q(mapping["card"])}, '') as card,
            {_q(mapping["line_kind"])} as line_kind,
        from {lines}
        """
    )
    tables = {
        "catalogue": config.sources.catalogue,
        "stores": config.sources.stores,
        "households": config.sources.households,
        "shelf_prices": config.sources.shelf_prices,
    }
    for table, source in tables.items():
        if source is None:
            continue
        relation = _read_csv(
            con,
            source.resolved_files(),
            all_varchar=False,
            text=("card", "sku", "store"),
            source=source,
        )
        selected = ", ".join(
            f"{_q(theirs)} as {_q(ours)}" for ours, theirs in source.columns.items()
        )
        con.execute(f"create or replace table {table} as select {selected} from {relation}")
    if config.sources.shelf_prices is not None:
        con.execute(
            "create or replace table shelf_prices as select * replace "
            "(cast(date as date) as date, cast(price as double) as price"
            + (
                ", cast(promo as boolean) as promo"
                if "promo" in config.sources.shelf_prices.columns
                else ""
            )
            + ") from shelf_prices"
        )


def _q(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _read_csv(con, files, all_varchar: bool, text=(), source=None) -> str:
    paths = "[" + ", ".join("'" + str(p).replace("'", "''") + "'" for p in files) + "]"
    if all_varchar:
        return f"read_csv({paths}, all_varchar = true)"
    types = {
        theirs: "VARCHAR"
        for ours, theirs in (source.columns.items() if source else ())
        if ours in text
    }
    spec = ", ".join(f"'{k}': '{v}'" for k, v in types.items())
    return f"read_csv({paths}, types = {{{spec}}})" if spec else f"read_csv({paths})"


def run_pipeline(config: ProjectConfig) -> tuple[BuildContext, pl.DataFrame]:
    """Ingest the config's sources, run the market and choice stages; returns ctx and choices.

    Uses the ingest step when it is importable, else `load_sources_plainly`.
    """
    from demandprep.market.stages import MARKET_STAGES
    from demandprep.warehouse import connect

    con = connect(config.warehouse)
    try:
        from demandprep.ingest.runner import ingest_all
    except ImportError:
        load_sources_plainly(con, config)
    else:
        ingest_all(con, config)
    ctx = BuildContext(con=con, config=config)
    for stage in MARKET_STAGES + CHOICE_STAGES:
        run_stage(stage, ctx)
    return ctx, choices_frame(ctx)
