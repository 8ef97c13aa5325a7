"""Instrument families on a hand-built fixture (tests/instruments_fixtures.py), every expected
value worked out by hand in the test from the fixture's prices and characteristics."""

from __future__ import annotations

import math
from datetime import date

import duckdb
import pytest
from instruments_fixtures import (
    WEEK,
    A,
    B,
    C,
    create_cost_shifters,
    create_market_tables,
    fixture_config,
    instrument_value,
    market_id,
    run_instrument_stages,
)

from demandprep.context import BuildContext
from demandprep.errors import UserError

ALL_FAMILIES = {
    "hausman": {"enabled": True},
    "characteristic_sums": ["roast_level", "organic"],
    "differentiation": ["roast_level"],
    "cost_shifters": {"join_on": ["period", "firm"], "columns": ["green_index"]},
}


def build(tmp_path, instruments, extra_rows=(), shifters_by_product=False, through="share_table"):
    con = duckdb.connect()
    create_market_tables(con, list(extra_rows))
    create_cost_shifters(con, with_product=shifters_by_product)
    ctx = BuildContext(con=con, config=fixture_config(tmp_path, instruments))
    run_instrument_stages(ctx, through=through)
    return ctx


@pytest.fixture()
def full_build(tmp_path):
    return build(tmp_path, ALL_FAMILIES)


def test_other_market_price_leaves_own_market_out(full_build):
    con = full_build.con
    # Hausman (1996): mean price of the product in the other markets of the same week.
    expected = {
        (A, "p1"): (5.0 + 6.0) / 2,
        (B, "p1"): (4.0 + 6.0) / 2,
        (C, "p1"): (4.0 + 5.0) / 2,
        (A, "p2"): 3.5,
        (B, "p2"): 3.0,
        (A, "p3"): (2.5 + 4.0) / 2,
        (B, "p3"): (2.0 + 4.0) / 2,
        (C, "p3"): (2.0 + 2.5) / 2,
    }
    for (market, product), value in expected.items():
        assert instrument_value(con, market, product, "iv_hausman_price") == pytest.approx(value)
        assert instrument_value(con, market, product, "iv_hausman_missing") is False


def test_product_sold_in_one_market_gets_null_and_flag_not_zero(full_build):
    con = full_build.con
    # p4 sells only in market A: no other market, so no other-market price.
    assert instrument_value(con, A, "p4", "iv_hausman_price") is None
    assert instrument_value(con, A, "p4", "iv_hausman_missing") is True
    assert full_build.facts["hausman_missing"] == {"product_markets": 1, "of": 9}
    assert any("iv_hausman_missing" in w for w in full_build.warnings)


def test_other_market_price_leaves_out_markets_where_the_product_did_not_sell(tmp_path):
    # p4 sells only in A (7.0) and sits unsold on B's shelf at 9.0 (zero_shares = 'keep'): A's
    # other-market price is still missing, B's is A's 7.0. Before: A got B's shelf price 9.0
    con = duckdb.connect()
    create_market_tables(con, zero_share_rows=[("S2", WEEK, "p4", 9.0)])
    create_cost_shifters(con)
    ctx = BuildContext(con=con, config=fixture_config(tmp_path, ALL_FAMILIES))
    run_instrument_stages(ctx)
    assert instrument_value(con, A, "p4", "iv_hausman_price") is None
    assert instrument_value(con, A, "p4", "iv_hausman_missing") is True
    assert instrument_value(con, B, "p4", "iv_hausman_price") == pytest.approx(7.0)
    assert instrument_value(con, A, "p1", "iv_hausman_price") == pytest.approx((5.0 + 6.0) / 2)


def test_a_product_without_a_firm_counts_as_a_firm_of_its_own(tmp_path):
    # p4 (only in A) has no firm: it is every other product's rival and has no own-firm
    # partner; before, a null firm made every pair with it neither same-firm nor rival
    con = duckdb.connect()
    create_market_tables(con)
    con.execute("update market_products set firm = null where product = 'p4'")
    create_cost_shifters(con)
    ctx = BuildContext(con=con, config=fixture_config(tmp_path, ALL_FAMILIES))
    run_instrument_stages(ctx)
    assert instrument_value(con, A, "p4", "iv_rival_count") == 3
    assert instrument_value(con, A, "p4", "iv_firm_count") == 0
    assert instrument_value(con, A, "p3", "iv_firm_count") == 0
    assert instrument_value(con, A, "p1", "iv_rival_count") == 2
    assert instrument_value(con, A, "p4", "iv_rival_sum_roast_level") == 1 + 3 + 2
    assert any("no firm" in w and "p4" in w for w in ctx.warnings), ctx.warnings


def test_other_market_price_can_leave_out_the_whole_region(tmp_path):
    ctx = build(tmp_path, {"hausman": {"exclude_same": "region"}})
    con = ctx.con
    # S1 and S2 are north, S3 south: north markets average only S3, and S3 averages S1 and S2.
    assert instrument_value(con, A, "p1", "iv_hausman_price") == pytest.approx(6.0)
    assert instrument_value(con, B, "p1", "iv_hausman_price") == pytest.approx(6.0)
    assert instrument_value(con, C, "p1", "iv_hausman_price") == pytest.approx((4.0 + 5.0) / 2)
    assert instrument_value(con, A, "p3", "iv_hausman_price") == pytest.approx(4.0)
    assert instrument_value(con, C, "p3", "iv_hausman_price") == pytest.approx((2.0 + 2.5) / 2)
    # p2 sells only in the north, so outside the region nobody sells it.
    assert instrument_value(con, A, "p2", "iv_hausman_price") is None
    assert instrument_value(con, B, "p2", "iv_hausman_missing") is True


def test_region_exclusion_works_for_a_geography_coarser_than_store(tmp_path):
    con = duckdb.connect()
    create_market_tables(con)
    # Markets by district: one store per district here, districts nested in regions.
    con.execute("alter table stores add column district varchar")
    con.execute("update stores set district = 'D' || substr(store, 2)")
    con.execute("update market_products set geography = 'D' || substr(geography, 2)")
    instruments = {"hausman": {"exclude_same": "region"}}
    ctx = BuildContext(con=con, config=fixture_config(tmp_path, instruments, "district"))
    run_instrument_stages(ctx)
    # Same groups as by store: north = S1, S2; south = S3.
    assert instrument_value(con, A, "p1", "iv_hausman_price") == pytest.approx(6.0)
    assert instrument_value(con, C, "p1", "iv_hausman_price") == pytest.approx((4.0 + 5.0) / 2)
    assert instrument_value(con, B, "p2", "iv_hausman_missing") is True


def test_other_market_price_ignores_other_periods(tmp_path):
    next_week = date(2024, 1, 8)
    ctx = build(tmp_path, {"hausman": {"enabled": True}}, [("S1", next_week, "p1", 100.0)])
    con = ctx.con
    # The week-2 price of 100 does not enter week 1, and week 2 has no other market.
    assert instrument_value(con, A, "p1", "iv_hausman_price") == pytest.approx((5.0 + 6.0) / 2)
    assert instrument_value(con, market_id("S1", next_week), "p1", "iv_hausman_missing") is True


def test_characteristic_sums_split_own_firm_and_rivals(full_build):
    con = full_build.con
    # Berry, Levinsohn & Pakes (1995): sums over the firm's other products and over rivals.
    # roast_level: p1 = 1, p2 = 3 (firm F1); p3 = 2, p4 = 5 (firm F2).
    expected = {
        (A, "p1"): (3, 2 + 5, 1, 2),
        (A, "p2"): (1, 2 + 5, 1, 2),
        (A, "p3"): (5, 1 + 3, 1, 2),
        (A, "p4"): (2, 1 + 3, 1, 2),
        (B, "p1"): (3, 2, 1, 1),
        (B, "p2"): (1, 2, 1, 1),
        (B, "p3"): (0, 1 + 3, 0, 2),
        (C, "p1"): (0, 2, 0, 1),
        (C, "p3"): (0, 1, 0, 1),
    }
    for (market, product), (firm_sum, rival_sum, firm_count, rival_count) in expected.items():
        row = (
            instrument_value(con, market, product, "iv_firm_sum_roast_level"),
            instrument_value(con, market, product, "iv_rival_sum_roast_level"),
            instrument_value(con, market, product, "iv_firm_count"),
            instrument_value(con, market, product, "iv_rival_count"),
        )
        assert row == (firm_sum, rival_sum, firm_count, rival_count), (market, product)


def test_boolean_characteristic_sums_count_true_values(full_build):
    con = full_build.con
    # organic: p1 and p4 true, p2 and p3 false; a boolean sums as 0/1.
    expected = {
        (A, "p1"): (0, 1),
        (A, "p2"): (1, 1),
        (A, "p3"): (1, 1),
        (A, "p4"): (0, 1),  # own firm: p3 (false); rivals: p1 (true), p2 (false)
        (B, "p3"): (0, 1),
        (C, "p3"): (0, 1),
    }
    for (market, product), (firm_sum, rival_sum) in expected.items():
        assert instrument_value(con, market, product, "iv_firm_sum_organic") == firm_sum
        assert instrument_value(con, market, product, "iv_rival_sum_organic") == rival_sum


def test_differentiation_instruments_use_rivals_and_one_standard_deviation(full_build):
    con = full_build.con
    # Gandhi & Houde (2019): sum over rivals of squared differences, and rivals within one sd.
    # roast_level over the nine inside product-markets: 1,3,2,5 | 1,3,2 | 1,2: sum 20, sum of
    # squares 58, sample variance (58 - 20**2 / 9) / 8 = 122 / 72, sd = 1.3017.
    sd = math.sqrt(122 / 72)
    assert sd == pytest.approx(1.30171, abs=1e-5)
    expected = {
        (A, "p1"): ((2 - 1) ** 2 + (5 - 1) ** 2, 1),  # differences 1 (near) and 4
        (A, "p2"): ((2 - 3) ** 2 + (5 - 3) ** 2, 1),  # 1 (near) and 2 (> sd)
        (A, "p3"): ((1 - 2) ** 2 + (3 - 2) ** 2, 2),
        (A, "p4"): ((1 - 5) ** 2 + (3 - 5) ** 2, 0),
        (B, "p1"): (1, 1),
        (B, "p3"): (2, 2),
        (C, "p1"): (1, 1),
        (C, "p3"): (1, 1),
    }
    for (market, product), (squares, near) in expected.items():
        assert instrument_value(con, market, product, "iv_diff_sq_roast_level") == squares
        assert instrument_value(con, market, product, "iv_diff_near_roast_level") == near


def test_cost_shifters_average_the_days_of_the_week_per_firm(full_build):
    con = full_build.con
    # F1 has 1.0 and 2.0 in the week of 2024-01-01 (10.0 falls in the next week); F2 has 3.0.
    for market, product in [(A, "p1"), (B, "p2"), (C, "p1")]:
        assert instrument_value(con, market, product, "iv_cost_green_index") == 1.5
    for market, product in [(A, "p3"), (A, "p4"), (C, "p3")]:
        assert instrument_value(con, market, product, "iv_cost_green_index") == 3.0


def test_cost_shifters_joined_by_firm_only_average_all_dates(tmp_path):
    shifters = {"join_on": ["firm"], "columns": ["green_index"]}
    ctx = build(tmp_path, {"hausman": {"enabled": False}, "cost_shifters": shifters})
    assert instrument_value(ctx.con, A, "p1", "iv_cost_green_index") == pytest.approx(13 / 3)
    assert instrument_value(ctx.con, A, "p3", "iv_cost_green_index") == 3.0


def test_cost_shifters_joined_by_product_leave_unmatched_products_null(tmp_path):
    shifters = {"join_on": ["period", "product"], "columns": ["bean_cost"]}
    ctx = build(tmp_path, {"cost_shifters": shifters}, shifters_by_product=True)
    assert instrument_value(ctx.con, B, "p1", "iv_cost_bean_cost") == 2.0
    assert instrument_value(ctx.con, C, "p3", "iv_cost_bean_cost") == 4.0
    assert instrument_value(ctx.con, A, "p2", "iv_cost_bean_cost") is None


def test_fringe_rows_get_no_instruments_and_are_nobodys_rival(full_build):
    con = full_build.con
    fringe_rows = con.execute("select count(*) from instruments where product = 'fringe'")
    assert fringe_rows.fetchone() == (0,)
    share_row = con.execute(
        "select iv_hausman_price, iv_rival_count from share_table "
        "where product = 'fringe' and market = ? and assumption = 'visits'",
        [A],
    ).fetchone()
    assert share_row == (None, None)


def test_share_table_adds_iv_columns_to_every_assumption(full_build):
    con = full_build.con
    counts = con.execute(
        "select assumption, count(*), count(iv_rival_count) from share_table group by 1 order by 1"
    ).fetchall()
    # 9 inside product-markets + 3 fringe rows per assumption; only inside rows have instruments.
    assert counts == [("peak", 12, 9), ("visits", 12, 9)]
    columns = [
        name for (name,) in con.execute("select column_name from instrument_columns").fetchall()
    ]
    assert columns == sorted(
        [
            "iv_cost_green_index",
            "iv_diff_near_roast_level",
            "iv_diff_sq_roast_level",
            "iv_firm_count",
            "iv_firm_sum_organic",
            "iv_firm_sum_roast_level",
            "iv_hausman_missing",
            "iv_hausman_price",
            "iv_rival_count",
            "iv_rival_sum_organic",
            "iv_rival_sum_roast_level",
        ]
    )


def test_unconfigured_families_add_no_columns(tmp_path):
    ctx = build(tmp_path, {"hausman": {"enabled": False}, "characteristic_sums": ["organic"]})
    names = [row[0] for row in ctx.con.execute("describe instruments").fetchall()]
    assert names == [
        "market",
        "product",
        "iv_firm_count",
        "iv_firm_sum_organic",
        "iv_rival_count",
        "iv_rival_sum_organic",
    ]


def test_unknown_characteristic_is_a_user_error(tmp_path):
    with pytest.raises(UserError, match="'body' is not a column of table 'market_products'"):
        build(tmp_path, {"characteristic_sums": ["body"]})


def test_exclude_same_must_be_a_stores_column(tmp_path):
    with pytest.raises(UserError, match="'district' is not a column of the stores table"):
        build(tmp_path, {"hausman": {"exclude_same": "district"}})


def test_exclude_same_coarser_than_geography_is_refused(tmp_path):
    con = duckdb.connect()
    create_market_tables(con)
    # Re-point market S1 to a store with two regions: its geography is not finer than region.
    con.execute("insert into stores values ('S1', 'south')")
    ctx = BuildContext(
        con=con, config=fixture_config(tmp_path, {"hausman": {"exclude_same": "region"}})
    )
    with pytest.raises(UserError, match="is not finer than 'region'"):
        run_instrument_stages(ctx)
