"""The choice build's settings: config values checked against the warehouse's real columns.

Every user choice reaches the static SQL of `sql/choices/` as a bound parameter from
`ChoiceSettings.params()`; column names from config are checked here first, so the SQL can
select them with `columns(lambda c: list_contains($names, c))` and never pastes a string.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import duckdb

from demandprep.config import ProjectConfig
from demandprep.errors import UserError

OUTSIDE = "none"
FRINGE = "fringe"
SHELF_FIXED = ("store", "date", "sku", "price", "promo")
ISO_WEEKDAY = {
    "monday": 1,
    "tuesday": 2,
    "wednesday": 3,
    "thursday": 4,
    "friday": 5,
    "saturday": 6,
    "sunday": 7,
}
# The loyalty closed form multiplies by lambda**-position inside blocks of this many purchases;
# exp(600) stays far below the largest double (about exp(709)).
LOYALTY_EXPONENT_BUDGET = 600.0

# Our own columns of `choices` and `choosers`; config names must not shadow them.
CHOICE_COLUMNS = (
    "occasion",
    "chooser",
    "store",
    "market",
    "occasion_at",
    "alternative",
    "chosen",
    "added_to_set",
    "choice_set_size",
    "sampled",
    "price",
    "price_source",
    "promo",
    "firm",
    "nest",
    "quantity",
    "spend",
    "previous_choice",
    "loyalty",
    "burn_in",
    "days_since_last_purchase",
    "purchase_count",
    "holdout",
    "household_known",
    "occasions",
    "purchase_occasions",
    "first_occasion_at",
    "last_occasion_at",
)


@dataclass(frozen=True)
class ChoiceSettings:
    """Checked settings of one choice build (column lists are real, quoted-safe names)."""

    config: ProjectConfig
    characteristics: tuple[str, ...]
    demographics: tuple[str, ...]
    shelf_attributes: tuple[str, ...]
    has_universe: bool
    has_market_skus: bool

    @property
    def loyalty_block(self) -> int:
        """Purchases per block of the loyalty closed form (see 045_choice_loyalty_events.sql)."""
        return loyalty_block_size(self.config.choices.loyalty_smoothing)

    def params(self) -> dict[str, object]:
        """Every bound parameter the choice SQL files use."""
        config, choices = self.config, self.config.choices
        return {
            "categories": list(config.markets.categories),
            "product_keys": list(config.products.keys),
            "rest": config.products.universe.rest,
            "firm_column": config.products.firm,
            "nest_column": config.products.nest or config.products.firm,
            "has_nest": config.products.nest is not None,
            "from_market": self.has_market_skus,
            "characteristics": list(self.characteristics),
            "alternative_columns": ["firm", "nest", *self.characteristics],
            "demographics": ["card", *self.demographics],
            "shelf_carried": ["price", "promo", *self.shelf_attributes],
            "shelf_attributes": ["promo", *self.shelf_attributes],
            "price_columns": [
                "store",
                "day",
                "alternative",
                "price",
                "price_source",
                "promo",
                *self.shelf_attributes,
            ],
            "occasion_mode": choices.occasions,
            "multiple_purchases": choices.multiple_purchases,
            "set_window_days": choices.choice_set_window_days,
            "price_window_days": choices.price_window_days,
            "smoothing": choices.loyalty_smoothing,
            "burn_in_days": choices.loyalty_burn_in_days,
            "loyalty_block": self.loyalty_block,
            "sample_size": choices.sampled_alternatives,
            "period": config.markets.period,
            "receipt_ids_unique_per": config.markets.receipt_ids_unique_per,
            "week_start": ISO_WEEKDAY[config.markets.week_starts_on],
            "outside": OUTSIDE,
            "fringe": FRINGE,
        }


def loyalty_block_size(smoothing: float) -> int:
    """Largest block length B with smoothing**-B inside the exponent budget."""
    return max(1, math.floor(LOYALTY_EXPONENT_BUDGET / -math.log(smoothing)))


def table_columns(con: duckdb.DuckDBPyConnection, table: str) -> list[str] | None:
    """Column names of a main-schema table or view, None when it does not exist."""
    rows = con.execute(
        "select column_name from information_schema.columns "
        "where table_schema = 'main' and table_name = ? order by ordinal_position",
        [table],
    ).fetchall()
    return [row[0] for row in rows] or None


def load_choice_settings(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> ChoiceSettings:
    """Check the config's column names against the warehouse and return the build's settings."""
    catalogue = _required_table(con, "catalogue", "sources.catalogue")
    _required_table(con, "raw_lines", "sources.receipts")
    products = config.products
    wanted = [*products.keys, products.firm, *([products.nest] if products.nest else [])]
    _check_present(wanted + list(products.characteristics), catalogue, "catalogue", "products")
    households = table_columns(con, "households")
    demographics = tuple(config.choices.demographics)
    if demographics and households is None:
        raise UserError(
            "choices.demographics names columns but there is no households table.",
            "add [sources.households] to the config or empty choices.demographics.",
        )
    _check_present(list(demographics), households or [], "households", "choices.demographics")
    shelf = table_columns(con, "shelf_prices")
    market = config.market_build_enabled
    extras = tuple(c for c in shelf or [] if c not in SHELF_FIXED)
    settings = ChoiceSettings(
        config=config,
        # the firm column is written as `firm` already
        characteristics=tuple(c for c in products.characteristics if c != products.firm),
        demographics=demographics,
        shelf_attributes=extras,
        # a choice-only project ignores market tables an earlier market build left behind
        has_universe=market and table_columns(con, "product_universe") is not None,
        has_market_skus=market and table_columns(con, "market_skus") is not None,
    )
    _check_no_shadowing(settings)
    return settings


def _required_table(con: duckdb.DuckDBPyConnection, table: str, key: str) -> list[str]:
    columns = table_columns(con, table)
    if columns is None:
        raise UserError(
            f"the warehouse has no {table} table, which the choice build reads.",
            f"configure {key} and run `demandprep ingest` first.",
        )
    return columns


def _check_present(names: list[str], columns: list[str], table: str, key: str) -> None:
    missing = [name for name in names if name not in columns]
    if missing:
        raise UserError(
            f"config key {key} names column {missing[0]!r}, which table {table} does not have.",
            f"map it under [sources.{table}.columns] or remove it; {table} has: "
            + ", ".join(columns),
        )


def _check_no_shadowing(settings: ChoiceSettings) -> None:
    groups = {
        "products.characteristics": settings.characteristics,
        "choices.demographics": settings.demographics,
        "sources.shelf_prices.columns": settings.shelf_attributes,
    }
    seen: dict[str, str] = {}
    for key, names in groups.items():
        for name in names:
            if name in CHOICE_COLUMNS:
                raise UserError(
                    f"column {name!r} from {key} has the name of a column the choice build "
                    "writes itself.",
                    "rename it in the source's column mapping.",
                )
            if name in seen and seen[name] != key:
                raise UserError(
                    f"column {name!r} appears both in {seen[name]} and in {key}.",
                    "rename one of them in its source's column mapping.",
                )
            seen[name] = key
