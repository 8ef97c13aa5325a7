"""pandera models of the instruments step's outputs, with the data dictionary's descriptions.

The iv_ columns depend on the config, so the models fix the key columns and check every iv_
column by its name pattern; `describe_instrument_column` gives the dictionary text for each.
"""

from __future__ import annotations

import pandera.polars as pa
import polars as pl

IV_PREFIX = "iv_"
NON_NEGATIVE_PREFIXES = ("iv_firm_count", "iv_rival_count", "iv_diff_sq_", "iv_diff_near_")
FAMILIES = ["hausman", "characteristic_sums", "differentiation", "cost_shifters"]


def _iv_columns(data: pa.PolarsData) -> dict[str, pl.DataType]:
    schema = data.lazyframe.collect_schema()
    return {name: dtype for name, dtype in schema.items() if name.startswith(IV_PREFIX)}


def _iv_columns_are_numeric(data: pa.PolarsData) -> bool:
    return all(dtype.is_numeric() or dtype == pl.Boolean for dtype in _iv_columns(data).values())


def _counts_and_distances_are_non_negative(data: pa.PolarsData) -> pl.LazyFrame:
    names = [n for n in _iv_columns(data) if n.startswith(NON_NEGATIVE_PREFIXES)]
    checks = [pl.col(n).is_null() | (pl.col(n) >= 0) for n in names] or [pl.lit(True)]
    return data.lazyframe.select(pl.all_horizontal(checks).alias("non_negative"))


def _hausman_flag_matches_null(data: pa.PolarsData) -> pl.LazyFrame:
    names = _iv_columns(data)
    if "iv_hausman_price" not in names or "iv_hausman_missing" not in names:
        return data.lazyframe.select(pl.lit(True).alias("flag_matches"))
    # The flag is null only on rows without instruments (the fringe, in share_table).
    flag, price = pl.col("iv_hausman_missing"), pl.col("iv_hausman_price")
    matches = flag.is_null() & price.is_null() | (flag == price.is_null())
    return data.lazyframe.select(matches.fill_null(False).alias("flag_matches"))


class InstrumentsModel(pa.DataFrameModel):
    """`instruments`: one row per inside product-market with the configured iv_ columns."""

    market: str = pa.Field(
        nullable=False,
        description="Market id: geography || '/' || period start (YYYY-MM-DD).",
        metadata={"unit": "id"},
    )
    product: str = pa.Field(
        nullable=False,
        description="Product id: the catalogue key values joined with '|'.",
        metadata={"unit": "id"},
    )

    class Config:
        strict = False
        unique = ["market", "product"]

    @pa.dataframe_check
    def iv_columns_are_numeric(cls, data: pa.PolarsData) -> bool:
        """Every iv_ column is a number or a boolean flag."""
        return _iv_columns_are_numeric(data)

    @pa.dataframe_check
    def counts_and_distances_are_non_negative(cls, data: pa.PolarsData) -> pl.LazyFrame:
        """Counts and sums of squared differences cannot be negative."""
        return _counts_and_distances_are_non_negative(data)

    @pa.dataframe_check
    def hausman_flag_matches_null(cls, data: pa.PolarsData) -> pl.LazyFrame:
        """iv_hausman_missing is true exactly where iv_hausman_price is null."""
        return _hausman_flag_matches_null(data)


class ShareTableModel(pa.DataFrameModel):
    """`share_table`: the shares rows (market build's columns) plus the iv_ columns."""

    assumption: str = pa.Field(
        nullable=False,
        description="Market-size assumption: the key of [market_size.<name>] in the config.",
        metadata={"unit": "id"},
    )
    market: str = pa.Field(nullable=False, description="Market id.", metadata={"unit": "id"})
    product: str = pa.Field(nullable=False, description="Product id.", metadata={"unit": "id"})

    class Config:
        strict = False
        unique = ["assumption", "market", "product"]

    @pa.dataframe_check
    def iv_columns_are_numeric(cls, data: pa.PolarsData) -> bool:
        """Every iv_ column is a number or a boolean flag."""
        return _iv_columns_are_numeric(data)

    @pa.dataframe_check
    def hausman_flag_matches_null(cls, data: pa.PolarsData) -> pl.LazyFrame:
        """iv_hausman_missing is true exactly where iv_hausman_price is null (null off-sample)."""
        return _hausman_flag_matches_null(data)


class InstrumentColumnsModel(pa.DataFrameModel):
    """`instrument_columns`: the catalogue of the iv_ columns a build produced."""

    column_name: str = pa.Field(
        nullable=False,
        unique=True,
        str_startswith=IV_PREFIX,
        description="Name of the iv_ column in instruments and share_table.",
    )
    role: str = pa.Field(
        isin=["instrument", "flag"],
        description="'instrument' (a numeric excluded instrument) or 'flag' (a boolean note).",
    )
    family: str = pa.Field(isin=FAMILIES, description="Instrument family that made the column.")
    source: str = pa.Field(
        nullable=True,
        description="Characteristic, shifter or 'price' it is built from (null for the counts).",
    )


FAMILY_TEXT = {
    "iv_hausman_price": (
        "Mean price of the same product in the other markets of the same period, leaving out "
        "its own market (or its whole exclusion group); null where no other market sells it "
        "(Hausman 1996).",
        "currency per equivalent unit",
        "sum_{m' in period, m' not in group(m), price observed} p_jm' / count of such m'",
    ),
    "iv_hausman_missing": (
        "True where iv_hausman_price is null because no other market of the period sells the "
        "product.",
        "flag",
        "count of other markets = 0",
    ),
    "iv_firm_count": (
        "Number of the firm's other products in the market (Berry, Levinsohn & Pakes 1995).",
        "products",
        "#{k in J_m : firm_k = firm_j, k != j}",
    ),
    "iv_rival_count": (
        "Number of rival firms' products in the market (Berry, Levinsohn & Pakes 1995).",
        "products",
        "#{k in J_m : firm_k != firm_j}",
    ),
    "iv_firm_sum_": (
        "Sum of {source} over the firm's other products in the market "
        "(Berry, Levinsohn & Pakes 1995).",
        "unit of {source}",
        "sum_{k in J_m, firm_k = firm_j, k != j} x_k",
    ),
    "iv_rival_sum_": (
        "Sum of {source} over rival firms' products in the market (Berry, Levinsohn & Pakes 1995).",
        "unit of {source}",
        "sum_{k in J_m, firm_k != firm_j} x_k",
    ),
    "iv_diff_sq_": (
        "Sum over rival products in the market of the squared difference in {source} "
        "(Gandhi & Houde 2019).",
        "squared unit of {source}",
        "sum_{k in J_m, firm_k != firm_j} (x_k - x_j)^2",
    ),
    "iv_diff_near_": (
        "Number of rival products in the market whose {source} differs by at most one sample "
        "standard deviation of {source} over all inside product-markets (Gandhi & Houde 2019).",
        "products",
        "#{k in J_m, firm_k != firm_j : |x_k - x_j| <= sd(x)}",
    ),
    "iv_cost_": (
        "Cost shifter {source}: mean of its rows matching the product-market on the "
        "configured keys (period, firm, product).",
        "unit of {source}",
        "mean of the matching cost_shifters rows",
    ),
}


def describe_instrument_column(column_name: str, source: str | None) -> dict[str, str]:
    """Data-dictionary entry (description, unit, formula) of one iv_ column."""
    for prefix, (description, unit, formula) in FAMILY_TEXT.items():
        if column_name == prefix or (prefix.endswith("_") and column_name.startswith(prefix)):
            name = source or ""
            return {
                "description": description.format(source=name),
                "unit": unit.format(source=name),
                "formula": formula,
            }
    return {"description": "Instrument column.", "unit": "", "formula": ""}
