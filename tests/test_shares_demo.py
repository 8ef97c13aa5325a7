"""End to end on a small generated demo world: generate -> real ingest -> market stages.

The share table is recomputed for a sample of markets straight from the raw demo files by a
separate code path (polars, no SQL) and must agree to 1e-9.
"""

from __future__ import annotations

import polars as pl
import pytest
from demo_worlds import SHARES
from market_fixtures import DEMO_PRODUCTS, demo_config

from demandprep.context import BuildContext
from demandprep.ingest.runner import ingest_all
from demandprep.market.stages import run_market_stages
from demandprep.warehouse import open_warehouse

TOLERANCE = 1e-9
UNITS_PER_PERSON_PER_DAY = 0.01
PEAK_MULTIPLE = 3.0
SAMPLED_MARKETS = 4


@pytest.fixture(scope="module")
def demo_build(tmp_path_factory, demo_worlds):
    """A 3-store, 2-week world built through the real ingest; returns (folder, shares frame)."""
    folder = demo_worlds.copy(SHARES, tmp_path_factory.mktemp("demo_shares") / "world")
    config = demo_config(
        folder,
        # keep every product: no rule to replicate
        products={**DEMO_PRODUCTS, "universe": {"rest": "fringe"}},
        market_size={
            "visits": {"method": "visits", "units_per_visit": 1.0},
            "catchment": {
                "method": "population",
                "units_per_person_per_day": UNITS_PER_PERSON_PER_DAY,
            },
            "peak": {"method": "peak_multiple", "multiple": PEAK_MULTIPLE},
        },
    )
    with open_warehouse(config.warehouse) as con:
        ingest_all(con, config)
        ctx = BuildContext(con=con, config=config)
        run_market_stages(ctx)
        shares = con.sql("select * from shares").pl()
        warnings = list(ctx.warnings)
    return folder, shares, warnings


def shares_from_raw_files(folder) -> pl.DataFrame:
    """Shares per assumption, market and product from the demo CSVs, with polars only."""
    receipts = (
        pl.concat(
            [
                pl.read_csv(
                    path,
                    schema_overrides={
                        "ticket_no": pl.String,
                        "item_code": pl.String,
                        "loyalty_card": pl.String,
                    },
                )
                for path in sorted((folder / "receipts").glob("*/receipts_*.csv.gz"))
            ]
        )
        .with_columns(
            day=pl.col("scanned_at").str.to_datetime("%Y-%m-%d %H:%M:%S").dt.date(),
        )
        .with_columns(
            # weeks start on Monday (the demo config's week_starts_on)
            week=pl.col("day") - pl.duration(days=pl.col("day").dt.weekday() - 1),
        )
    )
    catalogue = pl.read_csv(folder / "catalogue.csv", schema_overrides={"item_code": pl.String})
    stores = pl.read_csv(folder / "stores.csv")
    products = catalogue.filter(pl.col("category") == "coffee").select(
        "item_code",
        "format",
        product=pl.concat_str(
            [pl.col("roaster"), pl.col("format"), pl.col("pack_grams").cast(pl.String)],
            separator="|",
        ),
    )
    visits = (
        receipts.filter(pl.col("line_type") == "sale")
        .group_by("shop_id", "week")
        .agg(visits=pl.col("ticket_no").n_unique())
    )
    # a void cancels a re-scan of the same visit: both count, with opposite signs
    demand = (
        receipts.filter(pl.col("line_type").is_in(["sale", "void"]))
        .join(products, on="item_code")
        .group_by("shop_id", "week", "product", "format")
        .agg(
            packs=pl.col("qty").sum(),
            paid=(pl.col("line_value") - pl.col("discount_value")).sum(),
        )
        .filter(pl.col("packs") > 0)
    )
    peak = (
        demand.group_by("shop_id", "week")
        .agg(volume=pl.col("packs").sum())
        .group_by("shop_id")
        .agg(peak=pl.col("volume").max())
    )
    sized = (
        demand.join(visits, on=["shop_id", "week"])
        .join(stores.select("shop_id", "catchment_population"), on="shop_id")
        .join(peak, on="shop_id")
    )
    sizes = {
        "visits": pl.col("visits").cast(pl.Float64),
        "catchment": pl.col("catchment_population") * UNITS_PER_PERSON_PER_DAY * 7,
        "peak": pl.col("peak") * PEAK_MULTIPLE,
    }
    frames = []
    for assumption, size in sizes.items():
        frame = (
            sized.with_columns(assumption=pl.lit(assumption), market_size=size)
            .with_columns(
                share=pl.col("packs") / pl.col("market_size"),
            )
            .with_columns(
                outside_share=1 - pl.col("share").sum().over("shop_id", "week"),
                within_nest_share=pl.col("packs")
                / pl.col("packs").sum().over("shop_id", "week", "format"),
            )
        )
        frames.append(frame)
    return pl.concat(frames).select(
        "assumption",
        market=pl.col("shop_id") + "/" + pl.col("week").dt.strftime("%Y-%m-%d"),
        product=pl.col("product"),
        share=pl.col("share"),
        outside_share=pl.col("outside_share"),
        log_share_ratio=pl.col("share").log() - pl.col("outside_share").log(),
        within_nest_share=pl.col("within_nest_share"),
        price=pl.col("paid") / pl.col("packs"),
        market_size=pl.col("market_size"),
    )


def test_shares_recomputed_from_raw_files_with_polars_agree(demo_build):
    folder, built, _ = demo_build
    expected = shares_from_raw_files(folder)
    markets = sorted(expected["market"].unique().to_list())
    assert len(markets) == 6
    sample = markets[:: max(1, len(markets) // SAMPLED_MARKETS)][:SAMPLED_MARKETS]
    ours = built.filter(pl.col("market").is_in(sample))
    theirs = expected.filter(pl.col("market").is_in(sample))
    keys = ["assumption", "market", "product"]
    assert sorted(ours.select(keys).rows()) == sorted(theirs.select(keys).rows())
    joined = ours.join(theirs, on=keys, suffix="_polars")
    assert joined.height == theirs.height > 0
    for column in (
        "share",
        "outside_share",
        "log_share_ratio",
        "within_nest_share",
        "price",
        "market_size",
    ):
        difference = (joined[column] - joined[f"{column}_polars"]).abs().max()
        assert difference < TOLERANCE, f"{column}: largest difference {difference}"


def test_demo_shares_and_outside_share_sum_to_one(demo_build):
    _, built, _ = demo_build
    totals = built.group_by("assumption", "market").agg(
        total=pl.col("share").sum() + pl.col("outside_share").first()
    )
    # Berry (1994): the outside good takes what the market size leaves over
    assert (totals["total"] - 1).abs().max() < 1e-12
    assert built["assumption"].unique().sort().to_list() == ["catchment", "peak", "visits"]
