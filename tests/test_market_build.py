"""Market build on the hand-built fixture (tests/market_fixtures.py): values worked out here.

The fixture: stores S1, S2 (region north, populations 1000, 500) and S3 (south, 2000); weeks
starting 2024-01-01 and 2024-01-08; coffee products Alder|beans|250 (SKUs A1, A2),
Birch|ground|500 (B1), Cedar|capsules|100 (C1); loose coffee L1 (category coffee_bulk) and a
grocery item G1. Demand per store-week (packs):

    market           Alder  Birch  Cedar   visits (distinct receipts, all categories)
    S1/2024-01-01      3      1      3       5      (Cedar: 3 + a voided re-scan 1 - 1)
    S2/2024-01-01      1      2      -       3
    S1/2024-01-08      1      1      -       4      (+ 0.4 kg of loose coffee)
    S3/2024-01-08      -      -      2       2
"""

from __future__ import annotations

import copy
import math
from datetime import date, timedelta

import pytest
from market_fixtures import (
    BASE_CONFIG,
    WEEK1,
    WEEK2,
    Line,
    build_context,
    market_config,
    tiny_world,
)

from demandprep.config import parse_config
from demandprep.errors import UserError
from demandprep.export import report_data
from demandprep.market.stages import MARKET_STAGES, run_market_stages
from demandprep.stage import run_stage

ALDER, BIRCH, CEDAR = "Alder|beans|250", "Birch|ground|500", "Cedar|capsules|100"
STAGE_NAMES = [stage.name for stage in MARKET_STAGES]


def build(world=None, **sections):
    """Run the market stages on the fixture; returns the build context."""
    ctx = build_context(world or tiny_world(), market_config(**sections))
    run_market_stages(ctx)
    return ctx


@pytest.fixture(scope="module")
def default_build():
    """The fixture built once with the default config (visits x 2, item unit, nests by format)."""
    return build()


def rows(ctx, sql, params=None):
    return ctx.con.execute(sql, params or {}).fetchall()


def shares_by(ctx, assumption="visits"):
    """{(market, product): row dict} of the shares table for one assumption."""
    cursor = ctx.con.execute("select * from shares where assumption = ?", [assumption])
    names = [d[0] for d in cursor.description]
    return {
        (r["market"], r["product"]): r
        for r in (dict(zip(names, v, strict=True)) for v in cursor.fetchall())
    }


def sizes_by(ctx):
    return dict(
        ((a, m), s) for a, m, s in rows(ctx, "select assumption, market, market_size from markets")
    )


@pytest.mark.parametrize("zero_shares", ["drop", "keep", "add_one"])
def test_shares_and_outside_share_sum_to_one_in_every_market(zero_shares):
    ctx = build(
        _shelf_world(),
        market_size={
            "visits": {"method": "visits", "units_per_visit": 2.0},
            "peak": {"method": "peak_multiple", "multiple": 2.0},
        },
        shares={"zero_shares": zero_shares},
    )
    totals = rows(
        ctx,
        "select assumption, market, sum(share) + any_value(outside_share) from shares group by all",
    )
    assert len(totals) == 8
    for _, _, total in totals:
        # the outside good is what the market size leaves over: s_0 = 1 - sum_j s_j
        assert total == pytest.approx(1.0, abs=1e-12)
    outside = rows(
        ctx,
        "select max(abs(m.outside_share - s.outside_share)) "
        "from markets m join shares s using (assumption, market)",
    )
    assert outside == [(0.0,)]


def test_log_share_ratio_is_ln_share_minus_ln_outside_share(default_build):
    share = shares_by(default_build)[("S1/2024-01-01", BIRCH)]
    # Berry (1994): with the outside utility normalised to 0, ln s_j - ln s_0 = delta_j.
    # visits size = 5 receipts x 2 units = 10; s = 1/10; s_0 = 1 - 7/10
    assert share["share"] == pytest.approx(0.1)
    assert share["outside_share"] == pytest.approx(0.3)
    assert share["log_share_ratio"] == pytest.approx(math.log(0.1) - math.log(0.3))


def test_visits_size_counts_distinct_receipts_of_all_categories(default_build):
    sizes = sizes_by(default_build)
    # receipts r1..r5 (grocery-only r4 included) x 2 units per visit
    assert sizes[("visits", "S1/2024-01-01")] == pytest.approx(10.0)
    # r6, r7 and r8 (r8 also returns an item: still one visit)
    assert sizes[("visits", "S2/2024-01-01")] == pytest.approx(6.0)
    assert sizes[("visits", "S3/2024-01-08")] == pytest.approx(4.0)
    visits = dict(rows(default_build, "select market, visits from markets"))
    assert visits == {
        "S1/2024-01-01": 5,
        "S2/2024-01-01": 3,
        "S1/2024-01-08": 4,
        "S3/2024-01-08": 2,
    }


def test_population_size_is_population_times_rate_times_days():
    ctx = build(market_size={"people": {"method": "population", "units_per_person_per_day": 0.01}})
    sizes = sizes_by(ctx)
    assert sizes[("people", "S1/2024-01-01")] == pytest.approx(1000 * 0.01 * 7)
    assert sizes[("people", "S3/2024-01-08")] == pytest.approx(2000 * 0.01 * 7)


def test_population_size_sums_the_stores_of_a_geography_over_a_month():
    ctx = build(
        markets={"geography": "region", "period": "month", "categories": ["coffee"]},
        market_size={"people": {"method": "population", "units_per_person_per_day": 0.01}},
    )
    sizes = sizes_by(ctx)
    # north = S1 + S2 = 1500 people, January has 31 days
    assert sizes[("people", "north/2024-01-01")] == pytest.approx(1500 * 0.01 * 31)
    assert sizes[("people", "south/2024-01-01")] == pytest.approx(2000 * 0.01 * 31)


def test_peak_multiple_size_uses_the_largest_period_volume_of_the_geography():
    ctx = build(market_size={"peak": {"method": "peak_multiple", "multiple": 1.5}})
    sizes = sizes_by(ctx)
    # S1 sold 7 packs in week 1 and 2 in week 2: both S1 markets get 1.5 x 7
    assert sizes[("peak", "S1/2024-01-01")] == pytest.approx(10.5)
    assert sizes[("peak", "S1/2024-01-08")] == pytest.approx(10.5)
    assert sizes[("peak", "S2/2024-01-01")] == pytest.approx(4.5)


def test_table_size_is_joined_by_geography_and_period_start():
    world = tiny_world()
    world.size_table = [
        ("S1", WEEK1, 40.0),
        ("S1", WEEK2, 30.0),
        ("S2", WEEK1, 20.0),
        ("S3", WEEK2, 10.0),
        ("S3", WEEK1, 99.0),  # a market without sales: not used
    ]
    ctx = build(world, market_size={"user": {"method": "table"}})
    sizes = sizes_by(ctx)
    assert sizes == {
        ("user", "S1/2024-01-01"): 40.0,
        ("user", "S1/2024-01-08"): 30.0,
        ("user", "S2/2024-01-01"): 20.0,
        ("user", "S3/2024-01-08"): 10.0,
    }
    share = shares_by(ctx, "user")[("S1/2024-01-01", ALDER)]
    assert share["share"] == pytest.approx(3 / 40)


def test_table_size_missing_for_a_market_stops_naming_it():
    world = tiny_world()
    world.size_table = [("S1", WEEK1, 40.0), ("S1", WEEK2, 30.0), ("S2", WEEK1, 20.0)]
    with pytest.raises(UserError, match=r"market_size\.user.*S3/2024-01-08"):
        build(world, market_size={"user": {"method": "table"}})


def test_table_size_given_twice_for_a_market_stops_naming_it():
    world = tiny_world()
    world.size_table = [
        ("S1", WEEK1, 40.0),
        ("S1", WEEK1, 41.0),
        ("S1", WEEK2, 30.0),
        ("S2", WEEK1, 20.0),
        ("S3", WEEK2, 10.0),
    ]
    with pytest.raises(UserError, match=r"market_size\.user.*1 markets: S1/2024-01-01"):
        build(world, market_size={"user": {"method": "table"}})


def test_store_without_population_stops_the_population_assumption():
    world = tiny_world()
    world.stores[2] = ("S3", "south", "chainA", None)
    with pytest.raises(UserError, match=r"market_size\.people.*S3/2024-01-08"):
        build(
            world, market_size={"people": {"method": "population", "units_per_person_per_day": 1.0}}
        )


def test_assumptions_are_built_side_by_side():
    ctx = build(
        market_size={
            "visits": {"method": "visits", "units_per_visit": 2.0},
            "people": {"method": "population", "units_per_person_per_day": 0.01},
        }
    )
    counts = dict(rows(ctx, "select assumption, count(*) from shares group by all"))
    assert counts == {"visits": 8, "people": 8}
    quantities = rows(
        ctx,
        "select count(distinct equivalent_quantity) from shares "
        "where market = 'S1/2024-01-01' and product = ?",
        [ALDER],
    )
    assert quantities == [(1,)]


def test_market_size_too_small_stops_naming_markets_and_assumption():
    # S1 week 1: 5 visits x 1.2 = 6 < 7 packs sold; S2 week 1: 3.6 >= 3 still fits
    with pytest.raises(UserError) as caught:
        build(market_size={"tight": {"method": "visits", "units_per_visit": 1.2}})
    message = str(caught.value)
    assert "market_size.tight" in message
    assert "S1/2024-01-01" in message
    assert "S2/2024-01-01" not in message


def test_outside_share_below_floor_warns_with_the_count():
    # units_per_visit 1.5: S1 week 1 s_0 = 1 - 7/7.5 = 0.067, S2 week 1 s_0 = 1 - 3/4.5
    ctx = build(
        market_size={"snug": {"method": "visits", "units_per_visit": 1.5}},
        shares={"outside_share_floor": 0.1, "zero_shares": "drop"},
    )
    assert any("market_size.snug: 1 markets" in w for w in ctx.warnings)


def test_top_n_keeps_the_largest_products_ties_by_id_and_folds_the_rest_into_fringe():
    ctx = build(
        products={
            "keys": ["roaster", "format", "pack_grams"],
            "firm": "firm",
            "nest": "format",
            "characteristics": ["roast_level"],
            "equivalent_unit": {"kind": "item"},
            "universe": {"top_n": 2, "rest": "fringe"},
        }
    )
    universe = {
        p: (rank, kept)
        for p, rank, kept in rows(ctx, "select product, rank, kept from product_universe")
    }
    # volumes: Alder 5, Cedar 5 (tie, broken by product id), Birch 4
    assert universe == {ALDER: (1, True), CEDAR: (2, True), BIRCH: (3, False)}
    shares = shares_by(ctx)
    fringe = shares[("S2/2024-01-01", "fringe")]
    # Birch in S2 week 1: 2 packs, net 16 - 2 = 14
    assert fringe["is_fringe"] and fringe["units"] == 2 and fringe["price"] == pytest.approx(7.0)
    assert fringe["firm"] is None and fringe["nest"] is None and fringe["roast_level"] is None
    assert ("S2/2024-01-01", BIRCH) not in shares
    outside = shares[("S1/2024-01-01", ALDER)]["outside_share"]
    assert outside == pytest.approx(1 - 7 / 10)  # the fringe stays inside


def test_rest_outside_moves_dropped_products_into_the_outside_good():
    ctx = build(
        products={
            "keys": ["roaster", "format", "pack_grams"],
            "characteristics": [],
            "equivalent_unit": {"kind": "item"},
            "universe": {"top_n": 2, "rest": "outside"},
        }
    )
    shares = shares_by(ctx)
    assert not any(product in (BIRCH, "fringe") for _, product in shares)
    # S1 week 1: Alder 3 + Cedar 3 inside, Birch's 1 pack is outside: s_0 = 1 - 6/10
    assert shares[("S1/2024-01-01", ALDER)]["outside_share"] == pytest.approx(0.4)
    inside = dict(rows(ctx, "select market, inside_quantity from markets"))
    assert inside["S2/2024-01-01"] == pytest.approx(1.0)


def test_min_volume_share_drops_products_below_the_share_of_category_volume():
    ctx = build(
        products={
            "keys": ["roaster", "format", "pack_grams"],
            "equivalent_unit": {"kind": "item"},
            "universe": {"min_volume_share": 0.3},
        }
    )
    shares = dict(rows(ctx, "select product, volume_share from product_universe"))
    assert shares[BIRCH] == pytest.approx(4 / 14)
    kept = {p for (p,) in rows(ctx, "select product from product_universe where kept")}
    assert kept == {ALDER, CEDAR}  # 5/14 = 0.357 each; Birch 4/14 = 0.286 < 0.3


def test_min_market_presence_drops_products_sold_in_few_markets():
    ctx = build(
        products={
            "keys": ["roaster", "format", "pack_grams"],
            "equivalent_unit": {"kind": "item"},
            "universe": {"min_market_presence": 0.6},
        }
    )
    presence = dict(rows(ctx, "select product, market_presence from product_universe"))
    # Cedar sells in 2 of 4 markets, the others in 3 of 4
    assert presence == {ALDER: 0.75, BIRCH: 0.75, CEDAR: 0.5}
    kept = {p for (p,) in rows(ctx, "select product from product_universe where kept")}
    assert kept == {ALDER, BIRCH}


def test_weight_unit_converts_packs_and_weight_sold_kilograms():
    ctx = build(
        markets={"geography": "store", "period": "week", "categories": ["coffee", "coffee_bulk"]},
        products={
            "keys": ["roaster", "format", "pack_grams"],
            "characteristics": ["pack_grams"],
            "equivalent_unit": {"kind": "weight", "grams": 100.0},
        },
        market_size={"visits": {"method": "visits", "units_per_visit": 10.0}},
    )
    shares = shares_by(ctx)
    alder = shares[("S1/2024-01-01", ALDER)]
    # 3 packs of 250 g = 7.5 units of 100 g; net revenue 15 - 1 = 14
    assert alder["equivalent_quantity"] == pytest.approx(7.5)
    assert alder["price"] == pytest.approx(14 / 7.5)
    assert alder["gross_price"] == pytest.approx(15 / 7.5)
    loose = shares[("S1/2024-01-08", "Loose|loose|1000")]
    # 0.4 kg sold by weight = 4 units of 100 g, 6.00 paid
    assert loose["units"] == pytest.approx(0.4)
    assert loose["equivalent_quantity"] == pytest.approx(4.0)
    assert loose["price"] == pytest.approx(1.5)
    assert alder["share"] == pytest.approx(7.5 / 50)


def test_item_unit_warns_when_weight_sold_quantities_are_in_scope():
    ctx = build(
        markets={"geography": "store", "period": "week", "categories": ["coffee", "coffee_bulk"]}
    )
    assert any("non-integer quantities" in w for w in ctx.warnings)


def test_promo_share_is_the_share_of_units_sold_with_a_discount(default_build):
    shares = shares_by(default_build)
    # Alder in S1 week 1: 2 packs without, 1 pack with a discount
    assert shares[("S1/2024-01-01", ALDER)]["promo_share"] == pytest.approx(1 / 3)
    assert shares[("S2/2024-01-01", BIRCH)]["promo_share"] == pytest.approx(1.0)


def test_voids_cancel_their_scan_and_returns_count_only_when_configured():
    world = tiny_world()
    world.lines.append(Line("r9", "S1", WEEK2, "A1", -1, -5.0, kind="return"))
    without = shares_by(build(world))
    assert without[("S1/2024-01-01", CEDAR)]["units"] == 3  # 3 + 1 re-scan - 1 void
    assert without[("S1/2024-01-08", ALDER)]["units"] == 1  # the return is ignored
    sources = copy.deepcopy(BASE_CONFIG["sources"])
    sources["receipts"]["returns_in_demand"] = True
    world.lines.append(Line("r10", "S1", WEEK2, "A1", 2, 10.0))
    netted = shares_by(build(world, sources=sources))
    assert netted[("S1/2024-01-08", ALDER)]["units"] == 2  # 1 + 2 sold - 1 returned


def test_week_start_moves_the_period_boundaries():
    ctx = build(
        markets={
            "geography": "store",
            "period": "week",
            "week_starts_on": "wednesday",
            "categories": ["coffee"],
        }
    )
    periods = {m for (m,) in rows(ctx, "select distinct market from markets")}
    # Monday 2024-01-01 falls in the week from Wednesday 2023-12-27; 2024-01-03 starts one
    assert "S1/2023-12-27" in periods and "S1/2024-01-03" in periods
    assert all(
        d.isoweekday() == 3 for (d,) in rows(ctx, "select distinct period_start from markets")
    )


def test_quarter_and_day_periods():
    quarter = build(markets={"geography": "chain", "period": "quarter", "categories": ["coffee"]})
    assert rows(quarter, "select market, visits from markets") == [("chainA/2024-01-01", 14)]
    day = build(markets={"geography": "store", "period": "day", "categories": ["coffee"]})
    markets = {m for (m,) in rows(day, "select market from markets")}
    assert markets == {
        "S1/2024-01-01",
        "S1/2024-01-03",
        "S2/2024-01-01",
        "S2/2024-01-03",
        "S1/2024-01-08",
        "S3/2024-01-08",
    }


def _nested_world():
    world = tiny_world()
    world.catalogue.append(("D1", "coffee", "Dune", "Firm3", "beans", 500.0, "g", 500, 2, 0))
    world.lines.append(Line("r3", "S1", date(2024, 1, 3), "D1", 1, 7.0))
    return world


def test_within_nest_share_divides_by_the_nest_total_in_the_market():
    shares = shares_by(build(_nested_world()))
    # S1 week 1, nest beans: Alder 3 packs, Dune 1 pack
    alder = shares[("S1/2024-01-01", ALDER)]
    assert alder["within_nest_share"] == pytest.approx(3 / 4)
    assert alder["log_within_nest_share"] == pytest.approx(math.log(3 / 4))
    assert shares[("S1/2024-01-01", BIRCH)]["within_nest_share"] == pytest.approx(1.0)


def test_no_nest_leaves_within_nest_share_null():
    shares = shares_by(
        build(
            products={
                "keys": ["roaster", "format", "pack_grams"],
                "equivalent_unit": {"kind": "item"},
            }
        )
    )
    assert all(r["within_nest_share"] is None and r["nest"] is None for r in shares.values())


def _shelf_world():
    world = tiny_world()
    # Birch is on the shelf at S3 in week 2 but does not sell; Alder's shelf rows are ignored
    # where it sold
    world.shelf_prices = [
        ("S3", WEEK2, "B1", 9.0, False),
        ("S3", date(2024, 1, 10), "B1", 7.0, True),
        ("S1", WEEK1, "A1", 5.0, False),
    ]
    return world


def test_zero_shares_drop_adds_no_row():
    shares = shares_by(build(_shelf_world(), shares={"zero_shares": "drop"}))
    assert ("S3/2024-01-08", BIRCH) not in shares


def test_zero_shares_keep_adds_a_flagged_row_with_null_logs():
    ctx = build(_shelf_world(), shares={"zero_shares": "keep"})
    zero = shares_by(ctx)[("S3/2024-01-08", BIRCH)]
    assert zero["is_zero_share"] and zero["share"] == 0 and zero["units"] == 0
    assert zero["log_share_ratio"] is None and zero["log_within_nest_share"] is None
    assert zero["price"] == pytest.approx(8.0)  # mean shelf price (9 + 7) / 2
    assert zero["outside_share"] == pytest.approx(1 - 2 / 4)
    assert rows(ctx, "select count(*) from shares where is_zero_share") == [(1,)]


def test_zero_shares_add_one_adds_one_unit_to_every_good():
    ctx = build(_shelf_world(), shares={"zero_shares": "add_one"})
    shares = shares_by(ctx)
    # S3 week 2: M = 2 visits x 2 = 4, Cedar q = 2, Birch q = 0, J = 2 inside products
    # Gandhi, Lu & Shi (from memory): s_j = (q_j + 1) / (M + J + 1), s_0 = (M - Q + 1) / (M + J + 1)
    cedar, birch = shares[("S3/2024-01-08", CEDAR)], shares[("S3/2024-01-08", BIRCH)]
    assert cedar["share"] == pytest.approx(3 / 7)
    assert birch["share"] == pytest.approx(1 / 7)
    assert birch["outside_share"] == pytest.approx(3 / 7)
    assert birch["log_share_ratio"] == pytest.approx(math.log(1 / 3))
    # markets without zeros are adjusted too: S1 week 1, M = 10, J = 3, Alder q = 3
    assert shares[("S1/2024-01-01", ALDER)]["share"] == pytest.approx(4 / 14)


def test_zero_shares_keep_needs_the_shelf_price_file():
    with pytest.raises(UserError, match="shelf-price"):
        build(shares={"zero_shares": "keep"})


def test_unknown_product_key_column_stops_naming_the_key():
    with pytest.raises(UserError, match=r"'products.keys'.*'roastr'"):
        build(products={"keys": ["roastr"], "equivalent_unit": {"kind": "item"}})


def test_unknown_geography_column_stops_naming_the_key():
    with pytest.raises(UserError, match=r"'markets.geography'.*'district'"):
        build(markets={"geography": "district", "period": "week", "categories": ["coffee"]})


def test_characteristic_named_like_a_share_column_is_refused():
    with pytest.raises(UserError, match="'products.characteristics'"):
        build(
            products={
                "keys": ["roaster"],
                "characteristics": ["sku"],
                "equivalent_unit": {"kind": "item"},
            }
        )


def test_a_product_key_value_holding_the_separator_is_refused_by_sku():
    # ('Alder|x', 'ground', 500) and ('Alder', 'x|ground', 500) both joined to one product id,
    # 'Alder|x|ground|500', of two firms' SKUs: before, one product without a word
    world = tiny_world()
    world.catalogue[2] = ("B1", "coffee", "Alder|x", "Firm2", "ground", 500.0, "g", 500, 4, 1)
    world.catalogue[3] = ("C1", "coffee", "Alder", "Firm1", "x|ground", 500.0, "g", 500, 5, 0)
    with pytest.raises(UserError) as raised:
        build(world)
    assert raised.value.one_line() == (
        "config key 'products.keys': 2 in-scope catalogue SKUs have a key value holding '|', "
        "which joins the key values into the product id: B1 (roaster 'Alder|x'), "
        "C1 (format 'x|ground'). Hint: remove the '|' from those catalogue values; two "
        "products could otherwise get one id."
    )


def test_skus_of_one_product_that_disagree_on_a_characteristic_warn():
    world = tiny_world()
    world.catalogue[1] = ("A2", "coffee", "Alder", "Firm1", "beans", 250.0, "g", 250, 4, 0)
    ctx = build(world)
    assert any("disagree" in w and ALDER in w for w in ctx.warnings)
    # the product takes the values of its first SKU by id (A1: roast level 3)
    assert rows(ctx, "select roast_level from product_universe where product = ?", [ALDER]) == [
        (3,)
    ]


def test_unknown_categories_stop_the_build():
    with pytest.raises(UserError, match="'markets.categories'"):
        build(markets={"geography": "store", "period": "week", "categories": ["tea"]})


def test_sale_lines_of_stores_missing_from_the_stores_table_warn():
    world = tiny_world()
    world.lines.append(Line("r99", "S9", WEEK1, "A1", 1, 5.0))
    ctx = build(world)
    assert any("1 sale lines come from stores" in w for w in ctx.warnings)
    assert not any(m.startswith("S9") for (m,) in rows(ctx, "select market from markets"))


def test_rebuild_gives_identical_tables():
    first = build(_nested_world())
    second = build(_nested_world())
    for table in ("shares", "markets", "market_products", "product_universe"):
        query = f"select * from {table} order by all"  # noqa: S608
        assert first.con.execute(query).fetchall() == second.con.execute(query).fetchall()


# --- visit identity: (store, business day, receipt) by default ---------------------------------


def _daily_restart_lines() -> list[Line]:
    """Each store's receipts run 1..n every day (n varies), over ten days: two weeks."""
    lines = []
    for store_number, store in enumerate(("S1", "S2", "S3")):
        for offset in range(10):
            day = WEEK1 + timedelta(days=offset)
            for number in range(1, 3 + (offset + store_number) % 4):
                sku = "A1" if number % 2 else "G1"
                lines.append(Line(str(number), store, day, sku, 1, 5.0))
                if number == 2:  # a second line on the same receipt is still one visit
                    lines.append(Line(str(number), store, day, "C1", 1, 3.0))
    return lines


def _week_start(day: date) -> date:
    return day - timedelta(days=day.weekday())


def store_visits(world, **sections) -> dict[tuple[str, date], int]:
    """{(store, period start): visits} after the market stages up to market_store_visits."""
    ctx = build_context(world, market_config(**sections))
    for stage in MARKET_STAGES[: 1 + STAGE_NAMES.index("market_store_visits")]:
        run_stage(stage, ctx)
    query = "select store, period_start, visits from market_store_visits"
    return {(store, period): visits for store, period, visits in rows(ctx, query)}


def _markets_section(unique_per: str) -> dict:
    return {"geography": "store", "categories": ["coffee"], "receipt_ids_unique_per": unique_per}


def test_visits_count_store_day_receipt_triples_when_receipt_numbers_restart_daily():
    world = tiny_world()
    world.lines = _daily_restart_lines()
    ctx = build(world)  # default: receipt ids are unique per store and day
    expected: dict[tuple[str, date], set] = {}
    for line in world.lines:
        if line.kind == "sale":
            key = (line.store, _week_start(line.day))
            expected.setdefault(key, set()).add((line.store, line.day, line.receipt))
    counted = {
        (store, period): visits
        for store, period, visits in rows(
            ctx, "select store, period_start, visits from market_store_visits"
        )
    }
    assert counted == {key: len(triples) for key, triples in expected.items()}
    assert sum(counted.values()) == len({(x.store, x.day, x.receipt) for x in world.lines})
    sizes = {m: s for (a, m), s in sizes_by(ctx).items()}
    assert sizes["S1/2024-01-01"] == pytest.approx(2.0 * len(expected[("S1", WEEK1)]))


def test_visits_with_receipt_ids_unique_per_store_count_each_store_receipt_once():
    world = tiny_world()
    world.lines = _daily_restart_lines()
    counted = store_visits(world, markets=_markets_section("store"))
    # each (store, receipt) is one visit, in the period of its first line
    first_day: dict[tuple[str, str], date] = {}
    for line in world.lines:
        key = (line.store, line.receipt)
        first_day[key] = min(first_day.get(key, line.day), line.day)
    expected: dict[tuple[str, date], int] = {}
    for (store, _receipt), day in first_day.items():
        period = (store, _week_start(day))
        expected[period] = expected.get(period, 0) + 1
    assert {key: visits for key, visits in counted.items() if visits} == expected
    # receipts 1..n of week 2 were all seen in week 1: no visits there, so no visits size
    assert set(counted) - set(expected) == {("S1", WEEK2), ("S2", WEEK2), ("S3", WEEK2)}


def test_visits_with_receipt_ids_unique_per_chain_count_a_receipt_once_in_its_first_store():
    world = tiny_world()
    world.lines = [
        Line("c1", "S1", WEEK1, "A1", 1, 5.0),
        Line("c1", "S2", WEEK1 + timedelta(days=1), "A1", 1, 5.0),  # the same id, later
        Line("c2", "S2", WEEK1, "A1", 1, 5.0),
        Line("c3", "S2", WEEK1, "G1", 1, 1.0),
    ]
    chain = store_visits(world, markets=_markets_section("chain"))
    assert chain == {("S1", WEEK1): 1, ("S2", WEEK1): 2}
    per_store = store_visits(world, markets=_markets_section("store"))
    assert per_store == {("S1", WEEK1): 1, ("S2", WEEK1): 3}


def test_unknown_receipt_id_scope_is_refused_naming_the_key_and_the_choices(tmp_path):
    raw = copy.deepcopy(BASE_CONFIG)
    raw["markets"] = _markets_section("till")
    config_path = tmp_path / "demandprep.toml"
    with pytest.raises(UserError) as error:
        parse_config(raw, config_path, check_files=False)
    assert str(error.value) == (
        f"{config_path}: key 'markets.receipt_ids_unique_per': got 'till', expected "
        "'store_day', 'store' or 'chain'. Hint: use one of the allowed values."
    )


# --- zero-share product-markets: counted whatever the policy -----------------------------------

SKU_PRODUCTS = {"A1": ALDER, "A2": ALDER, "B1": BIRCH, "C1": CEDAR}


def _many_zeros_world():
    world = tiny_world()
    world.shelf_prices = [
        ("S1", WEEK1, "A1", 5.0, False),  # sold there: not a zero
        ("S1", WEEK2, "C1", 3.0, False),  # zero
        ("S1", date(2024, 1, 10), "C1", 3.0, False),  # the same zero, another shelf day
        ("S2", WEEK1, "C1", 3.0, False),  # zero
        ("S3", WEEK2, "A2", 5.0, False),  # zero
        ("S3", WEEK2, "B1", 9.0, False),  # zero
        ("S3", WEEK1, "B1", 9.0, False),  # S3 sells nothing in week 1: no market, no zero
        ("S2", WEEK1, "G1", 1.0, False),  # grocery: not in scope
    ]
    return world


def _expected_zero_share_product_markets(world) -> set[tuple[str, str]]:
    """(market, product) on the shelf in a market that sold something, where it sold nothing."""
    net: dict[tuple[str, str], float] = {}
    markets = set()
    for line in world.lines:
        if line.kind in ("sale", "void") and line.sku in SKU_PRODUCTS:
            market = f"{line.store}/{_week_start(line.day)}"
            key = (market, SKU_PRODUCTS[line.sku])
            net[key] = net.get(key, 0.0) + line.quantity
    markets = {market for (market, _), quantity in net.items() if quantity > 0}
    sold = {key for key, quantity in net.items() if quantity > 0}
    shelf = {
        (f"{store}/{_week_start(day)}", SKU_PRODUCTS[sku])
        for store, day, sku, _price, _promo in world.shelf_prices
        if sku in SKU_PRODUCTS
    }
    return {key for key in shelf - sold if key[0] in markets}


def test_zero_share_product_markets_dropped_by_the_policy_are_counted_and_warned():
    world = _many_zeros_world()
    expected = _expected_zero_share_product_markets(world)
    assert len(expected) == 4
    ctx = build(world, shares={"zero_shares": "drop"})
    assert ctx.facts["market"]["zero_share_product_markets"] == 4
    assert rows(ctx, "select count(*) from shares where is_zero_share") == [(0,)]
    shown = ", ".join(f"{product} in {market}" for market, product in sorted(expected))
    assert (
        "shares.zero_shares = 'drop': 4 product-markets on the shelf without sales have no row "
        f"in the share table ({shown})."
    ) in ctx.warnings


def test_zero_share_product_markets_kept_by_the_policy_are_the_same_count():
    world = _many_zeros_world()
    expected = _expected_zero_share_product_markets(world)
    ctx = build(world, shares={"zero_shares": "keep"})
    assert ctx.facts["market"]["zero_share_product_markets"] == len(expected)
    kept = rows(ctx, "select market, product from shares where is_zero_share order by all")
    assert kept == sorted(expected)
    assert not [w for w in ctx.warnings if w.startswith("shares.zero_shares")]


def test_report_counts_zero_share_product_markets_before_the_drop_policy():
    world = _many_zeros_world()
    ctx = build(world, shares={"zero_shares": "drop"})
    ctx.con.execute("create view share_table as select * from shares")
    counts = report_data.zero_share_counts(ctx.con)
    before = counts[counts["series"] == "on the shelf, no sales"]
    per_period = dict(zip(before["period_start"].dt.date, before["rows"], strict=True))
    expected = _expected_zero_share_product_markets(world)
    assert per_period == {
        WEEK1: sum(market.endswith(str(WEEK1)) for market, _ in expected),
        WEEK2: sum(market.endswith(str(WEEK2)) for market, _ in expected),
    }


def test_a_receipt_scope_too_wide_for_daily_restarting_tills_stops_with_a_hint():
    world = tiny_world()
    world.lines = _daily_restart_lines()
    with pytest.raises(UserError) as error:
        build(world, markets=_markets_section("store"))
    # week 2 repeats receipt numbers of week 1 only: no visit begins there
    assert str(error.value) == (
        "market_size.visits (method 'visits') has no usable size for 3 markets: "
        "S1/2024-01-08, S2/2024-01-08, S3/2024-01-08. Hint: those markets have no visits: no "
        "sale lines, or only receipt ids counted in an earlier period; check "
        "markets.receipt_ids_unique_per."
    )
