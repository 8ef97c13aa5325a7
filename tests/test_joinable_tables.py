"""products.parquet, geographies.parquet and choices.market join the share table without string
surgery, on a build of the committed sample; the dictionary states grains, keys and sizes."""

from __future__ import annotations

import csv
import json
from datetime import date, timedelta
from pathlib import Path

import polars as pl
import pytest
from sample_builds import build_sample, copy_sample

KEYS = ("roaster", "format", "pack_grams")  # the sample's [products] keys


@pytest.fixture(scope="module")
def fringe_build(tmp_path_factory: pytest.TempPathFactory, coffee_sample: Path) -> Path:
    # the sample keeps all 17 products; a top 12 sends five to the fringe
    config = copy_sample(coffee_sample, tmp_path_factory.mktemp("fringe") / "sample")
    config.write_text(config.read_text().replace("top_n = 20", "top_n = 12"))
    folder, _config = build_sample(config)
    return folder


@pytest.fixture(scope="module")
def build(tmp_path_factory: pytest.TempPathFactory, coffee_sample: Path) -> Path:
    config = copy_sample(coffee_sample, tmp_path_factory.mktemp("tables") / "sample")
    folder, _config = build_sample(config)
    return folder


def _csv_rows(path: Path) -> list[dict[str, str]]:
    # reference: Python's csv module reads the sample's inputs apart from the build
    with path.open(newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def test_products_join_the_share_table_on_the_product_id(build: Path) -> None:
    products = pl.read_parquet(build / "products.parquet")
    shares = pl.read_parquet(build / "shares_visits.parquet")
    assert products["product"].is_unique().all()
    joined = shares.join(products, on="product", how="left", suffix="_product")
    assert joined.height == shares.height
    assert joined["sku_count"].null_count() == 0
    inside = joined.filter(~pl.col("is_fringe"))
    assert inside["firm"].to_list() == inside["firm_product"].to_list()
    assert inside["nest"].to_list() == inside["nest_product"].to_list()


def test_key_part_columns_rebuild_the_product_id(build: Path) -> None:
    products = pl.read_parquet(build / "products.parquet").filter(pl.col("product") != "fringe")
    assert products.columns[:5] == ["product", "display_name", *KEYS]
    rebuilt = products.select(pl.concat_str([pl.col(k) for k in KEYS], separator="|"))
    assert rebuilt.to_series().to_list() == products["product"].to_list()


def test_products_list_the_skus_they_gather(fringe_build: Path, coffee_sample: Path) -> None:
    products = pl.read_parquet(fringe_build / "products.parquet")
    expected: dict[str, list[str]] = {}
    for row in _csv_rows(coffee_sample / "catalogue.csv"):
        if row["category"] == "coffee":
            product = "|".join(row[key] for key in KEYS)
            expected.setdefault(product, []).append(row["item_code"])
    kept = products.filter(pl.col("product") != "fringe")
    for product, skus, count in kept.select("product", "skus", "sku_count").iter_rows():
        assert skus == sorted(expected[product]), product
        assert count == len(skus)
    gathered = [s for p in kept.filter(~pl.col("kept"))["skus"].to_list() for s in p]
    assert len(gathered) >= 5
    (fringe,) = products.filter(pl.col("product") == "fringe")["skus"].to_list()
    assert fringe == sorted(gathered)
    shares = pl.read_parquet(fringe_build / "shares_visits.parquet")
    assert shares.join(products, on="product", how="anti").height == 0


def test_geographies_carry_the_store_levels_and_join_shares(
    build: Path, coffee_sample: Path
) -> None:
    geographies = pl.read_parquet(build / "geographies.parquet")
    stores = {row["shop_id"]: row for row in _csv_rows(coffee_sample / "stores.csv")}
    assert geographies["geography"].to_list() == sorted(stores)
    for geography, region, chain, count in geographies.select(
        "geography", "region", "chain", "store_count"
    ).iter_rows():
        assert (region, chain, count) == (
            stores[geography]["region"],
            stores[geography]["chain"],
            1,
        )
    markets = pl.read_parquet(build / "markets_visits.parquet")
    joined = markets.join(geographies, on="geography", how="left")
    assert joined["region"].null_count() == 0
    # region x period effects: one group per region and week
    assert joined.select("region", "period_start").n_unique() < markets.height
    shares = pl.read_parquet(build / "shares_visits.parquet")
    assert shares.join(geographies, on="geography", how="anti").height == 0


def test_choice_rows_carry_the_market_of_their_store_and_week(build: Path) -> None:
    choices = pl.read_parquet(build / "choices.parquet")
    markets = set(pl.read_parquet(build / "markets_visits.parquet")["market"].to_list())
    assert choices.columns.index("market") == choices.columns.index("store") + 1
    found = 0
    for store, at, market in choices.select("store", "occasion_at", "market").iter_rows():
        day: date = at.date()
        week = day - timedelta(days=day.weekday())  # the sample's weeks start on Monday
        expected = f"{store}/{week.isoformat()}"
        assert market == (expected if expected in markets else None)
        found += market is not None
    assert found > 0.9 * choices.height


def test_dictionary_states_grain_key_and_market_size_values(build: Path) -> None:
    dictionary = json.loads((build / "data_dictionary.json").read_text())
    for name in dictionary["files"]:
        table = dictionary["tables"][name]
        assert table["grain"].startswith("one row per "), name
        assert table["key"], name
    assert dictionary["tables"]["shares_visits.parquet"]["key"] == ["market", "product"]
    assert dictionary["tables"]["products.parquet"]["key"] == ["product"]
    assert dictionary["market_size"] == {
        "visits": {"method": "visits", "units_per_visit": 1.0},
        "peak": {"method": "peak_multiple", "multiple": 3.0},
        "catchment": {
            "method": "population",
            "units_per_person_per_day": 0.01,
            "population_column": "population",
        },
    }
    (size,) = [
        c for c in dictionary["files"]["markets_peak.parquet"] if c["column"] == "market_size"
    ]
    assert size["formula"] == "M = 3.0 x the geography's largest period volume (peak_multiple)"
    text = (build / "data_dictionary.md").read_text()
    assert "Grain: one row per market and product. Key: market, product." in text
    assert "- catchment: method population, units_per_person_per_day = 0.01" in text


def test_csv_copy_writes_the_sku_list_as_one_cell(build: Path, tmp_path: Path) -> None:
    from demandprep.export.csv_safe import write_safe_csv

    rows = write_safe_csv(build / "products.parquet", tmp_path / "products.csv")
    lists = pl.read_parquet(build / "products.parquet")["skus"].to_list()
    cells = [row["skus"] for row in _csv_rows(tmp_path / "products.csv")]
    assert rows == len(lists)
    assert cells == [";".join(skus) for skus in lists]


def test_region_markets_carry_only_the_levels_constant_in_a_region(
    tmp_path: Path, coffee_sample: Path
) -> None:
    config = copy_sample(coffee_sample, tmp_path / "sample")
    config.write_text(config.read_text().replace('geography = "store"', 'geography = "region"'))
    folder, _config = build_sample(config)
    geographies = pl.read_parquet(folder / "geographies.parquet")
    stores = _csv_rows(coffee_sample / "stores.csv")
    counts: dict[str, int] = {}
    for row in stores:
        counts[row["region"]] = counts.get(row["region"], 0) + 1
    # population differs between a region's stores, so it is no level of the region
    assert geographies.columns == ["geography", "store_count", "chain"]
    assert dict(geographies.select("geography", "store_count").iter_rows()) == counts
    markets = pl.read_parquet(folder / "markets_visits.parquet")
    assert markets.join(geographies, on="geography", how="anti").height == 0


def test_a_product_key_named_like_a_products_column_is_refused(tmp_path: Path) -> None:
    import duckdb
    from export_fixtures import export_config

    from demandprep.errors import UserError
    from demandprep.market.settings import check_inputs

    config = export_config(tmp_path)
    products = config.products.model_copy(update={"keys": ["brand", "skus"]})
    config = config.model_copy(update={"products": products})
    with duckdb.connect() as con, pytest.raises(UserError) as caught:
        check_inputs(con, config)
    assert (caught.value.message, caught.value.hint) == (
        "config key 'products.keys': 'skus' is a column name of the products table itself.",
        "rename the column in [sources.catalogue.columns].",
    )
