"""pandera models of the market build's tables (polars backend), one per SQL step.

Every field carries a description and, in metadata, its unit and formula: the export's data
dictionary is generated from them. Characteristic columns vary with the config, so the models
that carry them are not strict; `characteristic_columns_present` checks those separately.
"""

from __future__ import annotations

import datetime
from typing import Annotated, Any, Optional

import pandera.polars as pa
import polars as pl

# Relative tolerance of the formula checks (floating-point recomputation of a stored value).
FORMULA_TOLERANCE = 1e-9

Decimal = Annotated[pl.Decimal, 38, 6]


def described(description: str, unit: str = "", formula: str = "", **checks: Any) -> Any:
    """A pandera Field with its data-dictionary description, unit and formula."""
    return pa.Field(description=description, metadata={"unit": unit, "formula": formula}, **checks)


def _market_id(geography: str, period_start: str) -> pl.Expr:
    return pl.col(geography).cast(pl.String) + "/" + pl.col(period_start).dt.strftime("%Y-%m-%d")


def _close(left: pl.Expr, right: pl.Expr) -> pl.Expr:
    scale = pl.max_horizontal(left.abs(), right.abs(), pl.lit(1.0))
    return (left - right).abs() <= FORMULA_TOLERANCE * scale


# --- text used by several models ------------------------------------------------------------
MARKET = "Market id: geography, '/', period start as YYYY-MM-DD."
GEOGRAPHY = "Value of the configured geography column (markets.geography) of the stores table."
PERIOD_START = (
    "First day of the market's period (day, week from markets.week_starts_on, month, quarter)."
)
PRODUCT = (
    "Product id: the values of products.keys joined with '|'; 'fringe' for the composite product."
)
FIRM = "Firm owning the product (products.firm column); null for the composite fringe product."
NEST = "Nest of the product (products.nest column); null without nests and for the fringe product."
UNITS = (
    "Units sold, net of voids (and of returns when returns_in_demand): packs, or kg for "
    "weight-sold items."
)
EQUIVALENT = "Quantity in equivalent units (products.equivalent_unit: grams per unit, or one pack)."


class MarketCalendar(pa.DataFrameModel):
    """Every date the build meets, with the start and length of its period."""

    date: datetime.date = described(
        "A calendar date between the first and last receipt or shelf date.", unique=True
    )
    period_start: datetime.date = described(PERIOD_START)
    days_in_period: int = described(
        "Calendar days of the period.", "days", "1, 7, or days of the month / quarter", ge=1, le=92
    )

    class Config:
        strict = True


class MarketSkus(pa.DataFrameModel):
    """In-scope SKUs mapped to products, with their conversion to equivalent units."""

    sku: str = described("Catalogue SKU of an in-scope category.", unique=True)
    category: str = described("Catalogue category (one of markets.categories).")
    product: str = described(PRODUCT)
    firm: str = described("Firm of the SKU (products.firm column).", nullable=True)
    nest: str = described("Nest of the SKU (products.nest column).", nullable=True)
    pack_size: float = described(
        "Pack size (equivalent_unit.size_column); null for kind 'item'.", nullable=True
    )
    pack_unit: str = described(
        "Pack size unit, lower case (g, kg, lb, oz); null for kind 'item'.", nullable=True
    )
    equivalent_per_unit: float = described(
        "Equivalent units in one unit sold (one pack, or one kg of a weight-sold item).",
        "equivalent units per unit",
        "kind 'weight': pack_size x grams of pack_unit / equivalent_unit.grams; kind 'item': 1",
        gt=0,
    )

    class Config:
        strict = True


class MarketProductAttributes(pa.DataFrameModel):
    """One row per product with firm, nest and characteristics (from its first SKU by id)."""

    product: str = described(PRODUCT, unique=True)
    firm: str = described(FIRM, nullable=True)
    nest: str = described(NEST, nullable=True)

    class Config:
        strict = False  # characteristic columns vary with the config


class MarketStoreGeographies(pa.DataFrameModel):
    """Each store with its geography."""

    store: str = described("Store id of the stores table.", unique=True)
    geography: str = described(GEOGRAPHY)

    class Config:
        strict = True


class MarketStoreVisits(pa.DataFrameModel):
    """Visits (receipts with a sale line, any category) per store and period."""

    store: str = described("Store id of the receipt lines.")
    period_start: datetime.date = described(PERIOD_START)
    visits: int = described(
        "Visits (receipts with at least one sale line) whose first sale line falls in this "
        "store and period; a visit is a receipt id within markets.receipt_ids_unique_per.",
        "visits",
        "count of distinct (store, day, receipt) by default",
        ge=0,
    )
    sale_lines: int = described("Sale lines of the store in the period.", "lines", ge=1)

    class Config:
        strict = True
        unique = ["store", "period_start"]


class MarketSkuSales(pa.DataFrameModel):
    """Exact (decimal) demand sums per geography, period and in-scope SKU."""

    geography: str = described(GEOGRAPHY)
    period_start: datetime.date = described(PERIOD_START)
    product: str = described(PRODUCT)
    sku: str = described("Catalogue SKU.")
    units: Decimal = described(UNITS, "packs or kg", "sum(quantity)")
    gross_revenue: Decimal = described("Gross amount of the lines.", "currency", "sum(amount)")
    net_revenue: Decimal = described(
        "Amount paid after discounts.", "currency", "sum(amount - discount)"
    )
    promo_units: Decimal = described(
        "Units of lines with a discount.", "packs or kg", "sum(quantity) where discount <> 0"
    )
    lines: int = described("Demand lines summed.", "lines", ge=1)
    fractional_lines: int = described(
        "Lines with a non-integer quantity (weight-sold).", "lines", ge=0
    )

    class Config:
        strict = True
        unique = ["geography", "period_start", "sku"]


class MarketProductSales(pa.DataFrameModel):
    """Demand per market and product, before the universe rules."""

    market: str = described(MARKET)
    geography: str = described(GEOGRAPHY)
    period_start: datetime.date = described(PERIOD_START)
    product: str = described(PRODUCT)
    units: float = described(UNITS, "packs or kg", "sum(quantity)")
    equivalent_quantity: float = described(
        EQUIVALENT, "equivalent units", "sum(quantity x equivalent_per_unit)"
    )
    net_revenue: float = described(
        "Amount paid after discounts.", "currency", "sum(amount - discount)"
    )
    gross_revenue: float = described("Gross amount before discounts.", "currency", "sum(amount)")
    promo_units: float = described(
        "Units sold with a discount.", "packs or kg", "sum(quantity) where discount <> 0"
    )

    class Config:
        strict = True
        unique = ["market", "product"]


class ProductUniverse(pa.DataFrameModel):
    """Every in-scope product that sold, with the keep rules' inputs and verdict."""

    product: str = described(PRODUCT, unique=True)
    firm: str = described(FIRM, nullable=True)
    nest: str = described(NEST, nullable=True)
    volume: float = described(
        "Equivalent units sold over all markets.",
        "equivalent units",
        "sum over markets of q_jm",
        gt=0,
    )
    volume_share: float = described(
        "Share of the in-scope volume.", "fraction", "volume_j / sum_k volume_k", gt=0, le=1
    )
    market_presence: float = described(
        "Share of markets where the product sold.",
        "fraction",
        "markets with q_jm > 0 / markets",
        gt=0,
        le=1,
    )
    kept: bool = described(
        "True when the product passes every keep rule of products.universe.",
        "flag",
        "rank <= top_n and volume_share >= min_volume_share"
        " and market_presence >= min_market_presence",
    )
    rank: int = described(
        "Rank by volume, largest first; ties by product id.",
        "rank",
        "row_number() by volume desc, product",
        ge=1,
        unique=True,
    )

    class Config:
        strict = False  # characteristic columns vary with the config


class MarketAvailability(pa.DataFrameModel):
    """Universe products on the shelf per market, from the shelf-price file."""

    market: str = described(MARKET)
    product: str = described(PRODUCT)
    shelf_price: float = described(
        "Mean shelf price per equivalent unit over the market's shelf-price rows.",
        "currency per equivalent unit",
        "mean(price / equivalent_per_unit)",
    )

    class Config:
        strict = True
        unique = ["market", "product"]


class MarketZeroSales(pa.DataFrameModel):
    """Zero-share product-markets: universe products on the shelf that sold nothing there."""

    market: str = described(MARKET)
    geography: str = described(GEOGRAPHY)
    period_start: datetime.date = described(PERIOD_START)
    product: str = described(PRODUCT)
    shelf_price: float = described(
        "Mean shelf price per equivalent unit over the market's shelf-price rows.",
        "currency per equivalent unit",
        "mean(price / equivalent_per_unit)",
    )

    class Config:
        strict = True
        unique = ["market", "product"]


PRICE = described(
    "Net price per equivalent unit; for a zero-sale row, the mean shelf price per equivalent unit.",
    "currency per equivalent unit",
    "net_revenue / equivalent_quantity",
    ge=0,
)
GROSS_PRICE = described(
    "Gross price (before discounts) per equivalent unit; shelf price for a zero-sale row.",
    "currency per equivalent unit",
    "gross_revenue / equivalent_quantity",
    ge=0,
)
PROMO_SHARE = described(
    "Share of units sold with a discount; null for a zero-sale row.",
    "fraction",
    "units with discount <> 0 / units",
    nullable=True,
)
IS_FRINGE = described(
    "True for the composite 'fringe' product (products outside the universe, when"
    " universe.rest = 'fringe').",
    "flag",
)
IS_ZERO_SHARE = described(
    "True for a kept product on the shelf in the market (shelf-price file) that sold nothing.",
    "flag",
)


class MarketProducts(pa.DataFrameModel):
    """One row per market and inside product (assumption-free)."""

    market: str = described(MARKET)
    geography: str = described(GEOGRAPHY)
    period_start: datetime.date = described(PERIOD_START)
    product: str = described(PRODUCT)
    firm: str = described(FIRM, nullable=True)
    nest: str = described(NEST, nullable=True)
    units: float = described(UNITS, "packs or kg", "sum(quantity)", ge=0)
    equivalent_quantity: float = described(
        EQUIVALENT, "equivalent units", "q_jm = sum(quantity x equivalent_per_unit)", ge=0
    )
    net_revenue: float = described(
        "Amount paid after discounts.", "currency", "sum(amount - discount)"
    )
    gross_revenue: float = described("Gross amount before discounts.", "currency", "sum(amount)")
    price: float = PRICE
    gross_price: float = GROSS_PRICE
    promo_share: float = PROMO_SHARE
    is_fringe: bool = IS_FRINGE
    is_zero_share: bool = IS_ZERO_SHARE

    class Config:
        strict = False  # characteristic columns vary with the config
        unique = ["market", "product"]

    @pa.dataframe_check
    def market_id_matches(cls, data: Any) -> pl.LazyFrame:
        """The market id is built from the geography and the period start."""
        return data.lazyframe.select(pl.col("market") == _market_id("geography", "period_start"))

    @pa.dataframe_check
    def zero_rows_sold_nothing(cls, data: Any) -> pl.LazyFrame:
        """Zero-share rows have no quantity; every other row has some."""
        return data.lazyframe.select(
            pl.col("is_zero_share") == (pl.col("equivalent_quantity") == 0)
        )


class MarketSizes(pa.DataFrameModel):
    """Market size of every market under every assumption (null when it cannot be worked out)."""

    assumption: str = described("Name of the market-size assumption ([market_size.<name>]).")
    method: str = described(
        "Method of the assumption.", isin=["visits", "population", "peak_multiple", "table"]
    )
    market: str = described(MARKET)
    geography: str = described(GEOGRAPHY)
    period_start: datetime.date = described(PERIOD_START)
    market_size: float = described(
        "Potential demand M of the market in equivalent units.",
        "equivalent units",
        "visits x units_per_visit | population x units_per_person_per_day x days | "
        "multiple x max_t volume_gt | table size",
        nullable=True,
    )

    class Config:
        strict = True
        unique = ["assumption", "market"]


MARKET_SIZE = described(
    "Market size M under the assumption.",
    "equivalent units",
    "see market_size.<assumption>.method",
    gt=0,
)
OUTSIDE_SHARE = described(
    "Outside good's share: what the market size leaves over.",
    "fraction",
    "1 - Q/M; zero_shares 'add_one': (M - Q + 1) / (M + J + 1)",
    gt=0,
    le=1,
)


class Markets(pa.DataFrameModel):
    """One row per assumption and market."""

    assumption: str = described("Name of the market-size assumption ([market_size.<name>]).")
    market: str = described(MARKET)
    geography: str = described(GEOGRAPHY)
    period_start: datetime.date = described(PERIOD_START)
    market_size: float = MARKET_SIZE
    inside_quantity: float = described(
        "Equivalent units of every inside product (fringe included).",
        "equivalent units",
        "Q = sum_j q_jm",
        ge=0,
    )
    outside_share: float = OUTSIDE_SHARE
    product_count: int = described(
        "Inside products with a row in the share table (J).", "products", "count of rows", ge=1
    )
    visits: int = described(
        "Visits (receipts of any category; see markets.receipt_ids_unique_per) in the market.",
        "visits",
        "sum over stores of market_store_visits.visits",
        ge=0,
    )

    class Config:
        strict = True
        unique = ["assumption", "market"]

    @pa.dataframe_check
    def inside_below_size(cls, data: Any) -> pl.LazyFrame:
        """The inside quantity stays below the market size."""
        return data.lazyframe.select(pl.col("inside_quantity") < pl.col("market_size"))


class Shares(pa.DataFrameModel):
    """The share table, long over assumptions: one row per assumption, market and product."""

    assumption: str = described("Name of the market-size assumption ([market_size.<name>]).")
    market: str = described(MARKET)
    geography: str = described(GEOGRAPHY)
    period_start: datetime.date = described(PERIOD_START)
    product: str = described(PRODUCT)
    firm: str = described(FIRM, nullable=True)
    nest: str = described(NEST, nullable=True)
    units: float = described(UNITS, "packs or kg", "sum(quantity)", ge=0)
    equivalent_quantity: float = described(EQUIVALENT, "equivalent units", "q_jm", ge=0)
    net_revenue: float = described(
        "Amount paid after discounts.", "currency", "sum(amount - discount)"
    )
    price: float = PRICE
    gross_price: float = GROSS_PRICE
    promo_share: float = PROMO_SHARE
    share: float = described(
        "Market share of the product.",
        "fraction",
        "q_jm / M_m; zero_shares 'add_one': (q_jm + 1) / (M_m + J_m + 1)",
        ge=0,
        lt=1,
    )
    outside_share: float = OUTSIDE_SHARE
    log_share_ratio: float = described(
        "ln s_j - ln s_0, the logit inversion's left-hand side (Berry 1994); null where s_j = 0.",
        "log ratio",
        "ln(share) - ln(outside_share)",
        nullable=True,
    )
    within_nest_share: float = described(
        "Share of the product within its nest in the market; null without a nest.",
        "fraction",
        "s_j / sum of s_k over products k of the same nest in the market",
        nullable=True,
        ge=0,
        le=1,
    )
    log_within_nest_share: float = described(
        "ln of within_nest_share (nested logit regressor, Berry 1994); null when it is null or 0.",
        "log fraction",
        "ln(within_nest_share)",
        nullable=True,
        le=0,
    )
    market_size: float = MARKET_SIZE
    is_fringe: bool = IS_FRINGE
    is_zero_share: bool = IS_ZERO_SHARE

    class Config:
        strict = False  # characteristic columns vary with the config
        unique = ["assumption", "market", "product"]

    @pa.dataframe_check
    def log_share_ratio_formula(cls, data: Any) -> pl.LazyFrame:
        """log_share_ratio = ln s_j - ln s_0 where s_j > 0, null where s_j = 0."""
        expected = pl.col("share").log() - pl.col("outside_share").log()
        return data.lazyframe.select(
            pl.when(pl.col("share") > 0)
            .then(_close(pl.col("log_share_ratio"), expected).fill_null(False))
            .otherwise(pl.col("log_share_ratio").is_null())
        )

    @pa.dataframe_check
    def market_id_matches(cls, data: Any) -> pl.LazyFrame:
        """The market id is built from the geography and the period start."""
        return data.lazyframe.select(pl.col("market") == _market_id("geography", "period_start"))


class Products(pa.DataFrameModel):
    """One row per product id: key parts, firm, nest, characteristics and the SKUs gathered."""

    product: str = described(PRODUCT, unique=True)
    display_name: str = described(
        "Readable product name: the key parts separated by spaces; 'other products (fringe)' "
        "for the composite.",
        "text",
        "replace(product, '|', ' ')",
    )
    firm: Optional[str] = described(FIRM, nullable=True)  # noqa: UP045 - pandera: may be absent
    nest: Optional[str] = described(NEST, nullable=True)  # noqa: UP045 - a key part may be 'nest'
    sku_count: int = described(
        "Catalogue SKUs the product gathers (the fringe: those of every product not kept).",
        "SKUs",
        "count of skus",
        ge=1,
    )
    skus: Annotated[pl.List, pl.String] = described(
        "The SKUs the product gathers, sorted by SKU id.", "list of SKU ids"
    )
    kept: bool = described(
        "True when the product passes the keep rules of products.universe (a share-table row "
        "of its own); false for the fringe.",
        "flag",
    )
    is_fringe: bool = IS_FRINGE

    class Config:
        strict = False  # key parts and characteristics vary with the config


class MarketGeographyLevels(pa.DataFrameModel):
    """Stores columns that hold one value in every geography (null counts as a value)."""

    column_name: str = described("A stores column name.", unique=True)

    class Config:
        strict = True


class Geographies(pa.DataFrameModel):
    """One row per geography with its store count and the stores columns constant in it."""

    geography: str = described(GEOGRAPHY, unique=True)
    store_count: int = described(
        "Stores of the geography.", "stores", "count of stores mapped to the geography", ge=1
    )

    class Config:
        strict = False  # the level columns (region, chain, ...) vary with the stores file


MARKET_MODELS: dict[str, type[pa.DataFrameModel]] = {
    "market_calendar": MarketCalendar,
    "market_skus": MarketSkus,
    "market_product_attributes": MarketProductAttributes,
    "market_store_geographies": MarketStoreGeographies,
    "market_store_visits": MarketStoreVisits,
    "market_sku_sales": MarketSkuSales,
    "market_product_sales": MarketProductSales,
    "product_universe": ProductUniverse,
    "market_availability": MarketAvailability,
    "market_zero_sales": MarketZeroSales,
    "market_products": MarketProducts,
    "market_sizes": MarketSizes,
    "markets": Markets,
    "shares": Shares,
    "products": Products,
    "market_geography_levels": MarketGeographyLevels,
    "geographies": Geographies,
}


def characteristic_columns_present(
    frame_columns: list[str], characteristics: list[str]
) -> list[str]:
    """The configured characteristics missing from a table's columns (empty when all present)."""
    return [name for name in characteristics if name not in frame_columns]
