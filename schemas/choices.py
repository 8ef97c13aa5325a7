"""pandera models of the chooser-alternative build's outputs, `choices` and `choosers`.

Descriptions and metadata (unit, formula) of every column feed the export's data dictionary.
The dataframe checks of `Choices` need whole occasions. demandprep.choices.validation enforces
every check of `Choices` on every row through its SQL twin in sql/choices/091_choices_checks.sql
and runs the model itself on a sample of whole occasions: a new check needs its twin there.
Columns named by the config (characteristics, demographics, extra shelf-price columns) are
allowed beside these (strict = False) and are described by `config_column_notes`.
"""

from __future__ import annotations

import pandera.polars as pa
import polars as pl
from pandera.polars import PolarsData

from demandprep.config import ProjectConfig

OUTSIDE = "none"
FRINGE = "fringe"
PRICE_SOURCES = (
    "shelf",
    "store_period_median",
    "store_last_observed",
    "region_period_median",
    "missing",
    "outside",
)
UNPRICED_SOURCES = ("missing", "outside")
PSEUDONYM_PATTERN = r"^[0-9a-f]{32}$"
LOYALTY_TOLERANCE = 1e-9


def _implies(condition: pl.Expr, consequence: pl.Expr) -> pl.Expr:
    return ~condition | consequence


class Choices(pa.DataFrameModel):
    """One row per choice occasion and alternative (long format for conditional logit)."""

    occasion: str = pa.Field(
        description="Choice occasion: one card visit, or one product of a split visit (/n); the "
        "visit's day, then a keyed hash of the store and receipt, not linkable to the till's "
        "record without the key. Ids sort by day.",
        metadata={
            "unit": "id",
            "formula": "date(occasion_at) || ':' || first 32 hex digits of HMAC-SHA256(key, "
            "'occasion' NUL store NUL [day NUL] receipt) [|| '/' || spend rank]",
        },
    )
    chooser: str = pa.Field(
        str_matches=PSEUDONYM_PATTERN,
        description="Pseudonymised loyalty card (keyed hash; the raw card id is never exported).",
        metadata={"unit": "id", "formula": "first 32 hex digits of HMAC-SHA256(key, card)"},
    )
    store: str = pa.Field(description="Store of the visit.", metadata={"unit": "id"})
    market: str = pa.Field(
        nullable=True,
        description="Market id of the share table for the store's geography and the visit's "
        "period; null when that store-period is no market (no in-scope sale there, or no "
        "market build).",
        metadata={"unit": "id", "formula": "geography || '/' || period_start"},
    )
    occasion_at: pl.Datetime = pa.Field(
        description="Time of the visit's first sale line, local store time.",
        metadata={"unit": "timestamp", "formula": "min(sold_at) over the receipt"},
    )
    alternative: str = pa.Field(
        description="Alternative: a product id (catalogue keys joined with '|'), 'fringe' for "
        "the products outside the universe, or 'none' for no category purchase.",
        metadata={"unit": "id"},
    )
    chosen: bool = pa.Field(
        description="True on the alternative the chooser took at this occasion.",
        metadata={"unit": "flag"},
    )
    added_to_set: bool = pa.Field(
        description="True when the chosen alternative was not among the alternatives found "
        "available and was added to its own set.",
        metadata={"unit": "flag"},
    )
    choice_set_size: pl.Int64 = pa.Field(
        ge=1,
        description="Number of alternatives in the occasion's full choice set (before sampling).",
        metadata={"unit": "count"},
    )
    sampled: bool = pa.Field(
        description="True when the occasion's rows are a sample: the chosen alternative plus K "
        "drawn uniformly from the others (choices.sampled_alternatives).",
        metadata={"unit": "flag", "formula": "choice_set_size > K + 1"},
    )
    price: float = pa.Field(
        nullable=True,
        ge=0,
        description="Price of the alternative at the occasion, per unit as sold (pack, or kg "
        "for weight-sold items), after promotion; null for 'none' and where price_source is "
        "'missing'.",
        metadata={"unit": "currency per unit", "formula": "see price_source"},
    )
    price_source: str = pa.Field(
        isin=PRICE_SOURCES,
        description="Where the price comes from: shelf (shelf-price file), store_period_median "
        "(median net unit price paid in the store and market period), store_last_observed "
        "(median net unit price on the store's last day with a sale, within "
        "choices.price_window_days), region_period_median, missing, or outside ('none').",
        metadata={"unit": "category"},
    )
    promo: bool = pa.Field(
        nullable=True,
        description="On promotion: the shelf file's promo flag, else whether at least half of "
        "the lines the price came from carried a discount; null when unpriced.",
        metadata={"unit": "flag"},
    )
    firm: str = pa.Field(
        nullable=True,
        description="Firm owning the product (products.firm); null for 'fringe' and 'none'.",
        metadata={"unit": "id"},
    )
    nest: str = pa.Field(
        nullable=True,
        description="Nest of the product (products.nest); null when no nest is configured and "
        "for 'fringe' and 'none'.",
        metadata={"unit": "id"},
    )
    quantity: float = pa.Field(
        nullable=True,
        description="Quantity bought, on the chosen inside row only (null elsewhere).",
        metadata={"unit": "units as sold", "formula": "sum of quantity over the visit's lines"},
    )
    spend: float = pa.Field(
        nullable=True,
        description="Net amount paid, on the chosen inside row only (null elsewhere).",
        metadata={"unit": "currency", "formula": "sum of amount - discount over the lines"},
    )
    previous_choice: bool = pa.Field(
        description="True when the chooser bought this alternative at the latest earlier "
        "category purchase.",
        metadata={"unit": "flag"},
    )
    loyalty: float = pa.Field(
        nullable=True,
        ge=0,
        le=1 + LOYALTY_TOLERANCE,
        description="Exponentially smoothed loyalty (Guadagni & Little 1983) from earlier "
        "purchases, started at the chooser's purchase shares in the burn-in window; null on "
        "burn-in occasions.",
        metadata={
            "unit": "share",
            "formula": "L_j(n) = lambda L_j(n-1) + (1 - lambda) x_j(n), L_j(0) = burn-in share",
        },
    )
    burn_in: bool = pa.Field(
        description="True when the occasion falls within choices.loyalty_burn_in_days days of "
        "the chooser's first occasion (it initialises loyalty; exclude it from estimation).",
        metadata={"unit": "flag"},
    )
    days_since_last_purchase: pl.Int64 = pa.Field(
        nullable=True,
        ge=0,
        description="Days since the chooser's latest earlier category purchase; null when "
        "there is none (purchase_count = 0).",
        metadata={"unit": "days"},
    )
    purchase_count: pl.Int64 = pa.Field(
        ge=0,
        description="Number of the chooser's earlier visits with a category purchase.",
        metadata={"unit": "count"},
    )
    holdout: bool = pa.Field(
        description="Deterministic holdout flag of the chooser (choices.holdout_fraction).",
        metadata={"unit": "flag", "formula": "keyed hash of chooser < holdout_fraction"},
    )
    household_known: bool = pa.Field(
        description="True when the card was found in the households file (demographics).",
        metadata={"unit": "flag"},
    )

    class Config:
        strict = False
        coerce = False

    @pa.dataframe_check(error="exactly one chosen row per occasion")
    def one_chosen_per_occasion(cls, data: PolarsData) -> pl.LazyFrame:
        chosen = pl.col("chosen").cast(pl.Int64).sum().over("occasion")
        return data.lazyframe.select(chosen == 1)

    @pa.dataframe_check(error="each alternative at most once per occasion")
    def alternative_once_per_occasion(cls, data: PolarsData) -> pl.LazyFrame:
        return data.lazyframe.select(~pl.struct("occasion", "alternative").is_duplicated())

    @pa.dataframe_check(error="no more rows than the choice set, all of it unless sampled")
    def rows_match_set_size(cls, data: PolarsData) -> pl.LazyFrame:
        rows = pl.len().over("occasion")
        size = pl.col("choice_set_size")
        return data.lazyframe.select((rows <= size) & _implies(~pl.col("sampled"), rows == size))

    @pa.dataframe_check(error="price is null exactly where price_source is missing or outside")
    def price_null_has_source(cls, data: PolarsData) -> pl.LazyFrame:
        unpriced = pl.col("price_source").is_in(UNPRICED_SOURCES)
        return data.lazyframe.select(pl.col("price").is_null() == unpriced)

    @pa.dataframe_check(error="promo is null only on unpriced rows")
    def promo_null_has_source(cls, data: PolarsData) -> pl.LazyFrame:
        unpriced = pl.col("price_source").is_in(UNPRICED_SOURCES)
        return data.lazyframe.select(_implies(pl.col("promo").is_null(), unpriced))

    @pa.dataframe_check(error="'outside' price source exactly on the 'none' alternative")
    def outside_source_on_none(cls, data: PolarsData) -> pl.LazyFrame:
        outside = pl.col("price_source") == "outside"
        return data.lazyframe.select(outside == (pl.col("alternative") == OUTSIDE))

    @pa.dataframe_check(error="firm is null only for 'fringe' and 'none'")
    def firm_null_has_reason(cls, data: PolarsData) -> pl.LazyFrame:
        composite = pl.col("alternative").is_in((FRINGE, OUTSIDE))
        return data.lazyframe.select(_implies(pl.col("firm").is_null(), composite))

    @pa.dataframe_check(error="quantity and spend set exactly on the chosen inside row")
    def purchase_on_chosen_row(cls, data: PolarsData) -> pl.LazyFrame:
        bought = pl.col("chosen") & (pl.col("alternative") != OUTSIDE)
        return data.lazyframe.select(
            (pl.col("quantity").is_not_null() == bought) & (pl.col("spend").is_not_null() == bought)
        )

    @pa.dataframe_check(error="only the chosen alternative is ever added to its set")
    def added_only_if_chosen(cls, data: PolarsData) -> pl.LazyFrame:
        return data.lazyframe.select(_implies(pl.col("added_to_set"), pl.col("chosen")))

    @pa.dataframe_check(error="loyalty is null exactly on burn-in occasions")
    def loyalty_null_in_burn_in(cls, data: PolarsData) -> pl.LazyFrame:
        return data.lazyframe.select(pl.col("loyalty").is_null() == pl.col("burn_in"))

    @pa.dataframe_check(error="days_since_last_purchase is null exactly when purchase_count = 0")
    def days_since_null_without_purchase(cls, data: PolarsData) -> pl.LazyFrame:
        no_purchase = pl.col("purchase_count") == 0
        return data.lazyframe.select(pl.col("days_since_last_purchase").is_null() == no_purchase)

    @pa.dataframe_check(error="previous_choice never on 'none'")
    def previous_choice_inside(cls, data: PolarsData) -> pl.LazyFrame:
        return data.lazyframe.select(
            _implies(pl.col("alternative") == OUTSIDE, ~pl.col("previous_choice"))
        )

    @pa.dataframe_check(error="occasion-level columns constant within the occasion")
    def occasion_columns_constant(cls, data: PolarsData) -> pl.LazyFrame:
        columns = ("chooser", "store", "occasion_at", "choice_set_size", "holdout", "burn_in")
        same = [pl.col(c).n_unique().over("occasion") == 1 for c in columns]
        return data.lazyframe.select(pl.all_horizontal(same))


class Choosers(pa.DataFrameModel):
    """One row per chooser with at least one occasion."""

    chooser: str = pa.Field(
        unique=True,
        str_matches=PSEUDONYM_PATTERN,
        description="Pseudonymised loyalty card (keyed hash; the raw card id is never exported).",
        metadata={"unit": "id", "formula": "first 32 hex digits of HMAC-SHA256(key, card)"},
    )
    holdout: bool = pa.Field(
        description="Deterministic holdout flag (choices.holdout_fraction).",
        metadata={"unit": "flag", "formula": "keyed hash of chooser < holdout_fraction"},
    )
    household_known: bool = pa.Field(
        description="True when the card was found in the households file; the demographics "
        "columns are null otherwise.",
        metadata={"unit": "flag"},
    )
    occasions: pl.Int64 = pa.Field(
        ge=1, description="Number of choice occasions.", metadata={"unit": "count"}
    )
    purchase_occasions: pl.Int64 = pa.Field(
        ge=0,
        description="Number of occasions that chose an inside alternative.",
        metadata={"unit": "count"},
    )
    first_occasion_at: pl.Datetime = pa.Field(
        description="Time of the first occasion.", metadata={"unit": "timestamp"}
    )
    last_occasion_at: pl.Datetime = pa.Field(
        description="Time of the last occasion.", metadata={"unit": "timestamp"}
    )

    class Config:
        strict = False
        coerce = False

    @pa.dataframe_check(error="purchase occasions never exceed occasions")
    def purchases_within_occasions(cls, data: PolarsData) -> pl.LazyFrame:
        return data.lazyframe.select(pl.col("purchase_occasions") <= pl.col("occasions"))


def config_column_notes(config: ProjectConfig, shelf_columns: list[str]) -> dict[str, dict]:
    """Description and metadata of the columns the config adds to `choices` / `choosers`."""
    notes: dict[str, dict] = {}
    for name in shelf_columns:
        notes[name] = {
            "description": f"Shelf-price file column {name!r} of the alternative at the occasion "
            "(largest value over its SKUs); null unless price_source is 'shelf'.",
            "metadata": {"unit": "as in the source", "table": "choices"},
        }
    for name in config.products.characteristics:
        notes.setdefault(
            name,
            {
                "description": f"Catalogue characteristic {name!r} of the product (smallest value "
                "over its SKUs); null for 'fringe' and 'none'.",
                "metadata": {"unit": "as in the source", "table": "choices"},
            },
        )
    for name in config.choices.demographics:
        notes.setdefault(
            name,
            {
                "description": f"Households-file column {name!r} of the chooser; null when "
                "household_known is false.",
                "metadata": {"unit": "as in the source", "table": "choices, choosers"},
            },
        )
    return notes
