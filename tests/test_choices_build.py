"""The chooser-alternative build on hand-built tables, each value worked out in the test."""

from __future__ import annotations

import hashlib
import os
from datetime import date, datetime, timedelta

import polars as pl
import pytest
from choices_fixtures import ChoiceWorld, choices_frame, row

from demandprep.choices.pseudonyms import occasion_id
from demandprep.choices.validation import validate_choices
from demandprep.errors import UserError
from demandprep.schemas.choices import Choices
from demandprep.validate import validate_frame

MONDAY = date(2024, 1, 15)


def at(day: date, hour: int = 10) -> datetime:
    return datetime(day.year, day.month, day.day, hour)


def three_products(world: ChoiceWorld, store: str = "S1", prices=(2.0, 3.0, 4.0)) -> None:
    world.product("a1", "A", 1)
    world.product("b1", "B", 2)
    world.product("c1", "C", 3)
    world.store(store)
    for sku, price in zip(("a1", "b1", "c1"), prices, strict=True):
        world.shelf_price(store, MONDAY, sku, price)


def multi_purchase_world() -> tuple[ChoiceWorld, str, str]:
    world = ChoiceWorld()
    three_products(world)
    # visit 1 buys A (spend 2.0) and B (spend 3.0): B has the larger spend
    first = world.visit("S1", at(MONDAY), "card1", [("a1", 1, 2.0), ("b1", 1, 3.0)])
    second = world.visit("S1", at(MONDAY + timedelta(days=2)), "card1", [("c1", 1, 4.0)])
    return world, first, second


def test_largest_spend_keeps_the_larger_purchase_and_counts_the_rest():
    world, first, _ = multi_purchase_world()
    ctx = world.build({"choices": {"multiple_purchases": "largest_spend"}})
    frame = choices_frame(ctx)
    assert frame.filter(pl.col("occasion") == first)["alternative"].to_list() == ["A", "B", "C"]
    assert row(frame, first, "B")["chosen"] and not row(frame, first, "A")["chosen"]
    assert row(frame, first, "B")["spend"] == 3.0
    facts = ctx.facts["choices"]["multiple_purchases"]
    assert facts == {
        "policy": "largest_spend",
        "visits": 1,
        "products_in_those_visits": 2,
        "purchases_not_kept": 1,
    }


def test_split_makes_one_occasion_per_product_sharing_history():
    world, first, second = multi_purchase_world()
    ctx = world.build({"choices": {"multiple_purchases": "split"}})
    frame = choices_frame(ctx)
    # spend rank 1 is B (3.0), rank 2 is A (2.0)
    assert row(frame, f"{first}/1", "B")["chosen"]
    assert row(frame, f"{first}/2", "A")["chosen"]
    assert ctx.facts["choices"]["multiple_purchases"]["occasions_made"] == 2
    # both halves weigh 1/2 in the recursion: L = (1 - 0.5) * 0.5 = 0.25 after the split visit
    assert row(frame, second, "A")["loyalty"] == pytest.approx(0.25)
    assert row(frame, second, "B")["loyalty"] == pytest.approx(0.25)
    assert row(frame, second, "A")["previous_choice"] and row(frame, second, "B")["previous_choice"]
    assert row(frame, second, "A")["purchase_count"] == 1


def test_drop_removes_visits_with_several_products():
    world, first, second = multi_purchase_world()
    ctx = world.build({"choices": {"multiple_purchases": "drop", "occasions": "all_visits"}})
    frame = choices_frame(ctx)
    assert set(frame["occasion"]) == {second}
    assert ctx.facts["choices"]["multiple_purchases"]["visits_dropped"] == 1
    # the dropped visit is no occasion, so it leaves no history either
    assert row(frame, second, "C")["purchase_count"] == 0


def test_all_visits_adds_the_outside_alternative_to_every_set():
    world = ChoiceWorld()
    three_products(world)
    bought = world.visit("S1", at(MONDAY), "card1", [("a1", 1, 2.0)])
    browsed = world.visit("S1", at(MONDAY, 12), "card1")
    frame = choices_frame(world.build({"choices": {"occasions": "all_visits"}}))
    assert frame.group_by("occasion").len()["len"].to_list() == [4, 4]
    assert row(frame, browsed, "none")["chosen"]
    assert row(frame, bought, "none")["price_source"] == "outside"
    assert row(frame, bought, "none")["price"] is None
    assert row(frame, browsed, "A")["previous_choice"]
    assert not row(frame, browsed, "none")["previous_choice"]


def test_category_visits_skip_visits_without_a_purchase():
    world = ChoiceWorld()
    three_products(world)
    bought = world.visit("S1", at(MONDAY), "card1", [("a1", 1, 2.0)])
    world.visit("S1", at(MONDAY, 12), "card1")
    world.visit("S1", at(MONDAY, 13), None, [("b1", 1, 3.0)])
    frame = choices_frame(world.build())
    assert set(frame["occasion"]) == {bought}
    assert "none" not in set(frame["alternative"])


def fallback_world() -> tuple[ChoiceWorld, str, str]:
    """S1 has shelf prices; S2 (same region) and S3 (south) have none."""
    world = ChoiceWorld()
    for sku, brand in (("a1", "A"), ("b1", "B"), ("c1", "C"), ("d1", "D"), ("e1", "E")):
        world.product(sku, brand, 1)
    world.store("S1", "north")
    world.store("S2", "north")
    world.store("S3", "south")
    world.shelf_price("S1", MONDAY, "a1", 2.5, promo=True)
    wednesday = MONDAY + timedelta(days=2)
    # A: sold in S2 this week at unit prices 2, 3 and 10 -> store-period median 3
    world.visit("S2", at(MONDAY), None, [("a1", 2, 4.0)])
    world.visit("S2", at(MONDAY, 11), None, [("a1", 1, 3.0)])
    world.visit("S2", at(MONDAY, 12), None, [("a1", 1, 10.0)])
    # B: last sold in S2 five days before, at net 4 and 5 with a discount -> 4.5, promo
    world.visit(
        "S2", at(MONDAY - timedelta(days=5)), None, [("b1", 1, 5.0), ("b1", 1, 6.0)], discount=1.0
    )
    world.visit("S2", at(MONDAY - timedelta(days=12)), None, [("b1", 1, 1.0)])
    # C: sold in S2 15 days before (in the set, too old for a 7-day price window); S1, same
    # region, sold it this week at 6 -> regional median 6
    world.visit("S2", at(wednesday - timedelta(days=15)), None, [("c1", 1, 9.0)])
    world.visit("S1", at(MONDAY + timedelta(days=1)), None, [("c1", 1, 6.0)])
    # D: sold in S2 14 days before; this week only in S3, another region -> no price
    world.visit("S2", at(wednesday - timedelta(days=14)), None, [("d1", 1, 8.0)])
    world.visit("S3", at(MONDAY + timedelta(days=1)), None, [("d1", 1, 8.0)])
    # the chooser buys E, never sold in S2 before, at 7
    occasion = world.visit("S2", at(wednesday), "card1", [("e1", 1, 7.0)])
    shelf_occasion = world.visit(
        "S1", at(MONDAY + timedelta(days=1), 15), "card2", [("a1", 1, 2.5)]
    )
    return world, occasion, shelf_occasion


def test_price_fallbacks_follow_the_configured_order():
    world, occasion, shelf_occasion = fallback_world()
    ctx = world.build({"choices": {"price_window_days": 7}})
    frame = choices_frame(ctx)
    got = {
        alt: (r["price"], r["price_source"], r["promo"])
        for alt in "ABCDE"
        for r in [row(frame, occasion, alt)]
    }
    assert got == {
        "A": (3.0, "store_period_median", False),
        "B": (4.5, "store_last_observed", True),
        "C": (6.0, "region_period_median", False),
        "D": (None, "missing", None),
        "E": (7.0, "store_period_median", False),
    }
    assert (
        row(frame, shelf_occasion, "A")["price"] == 2.5
        and row(frame, shelf_occasion, "A")["price_source"] == "shelf"
    )
    assert row(frame, shelf_occasion, "A")["promo"] is True


def test_chosen_alternative_missing_from_the_set_is_added_and_counted():
    world, occasion, shelf_occasion = fallback_world()
    ctx = world.build({"choices": {"price_window_days": 7}})
    frame = choices_frame(ctx)
    assert row(frame, occasion, "E")["added_to_set"]
    assert row(frame, occasion, "E")["choice_set_size"] == 5
    assert not row(frame, occasion, "A")["added_to_set"]
    # S1's shelf snapshot lists only A, which card2 bought: nothing to add there
    assert frame.filter(pl.col("occasion") == shelf_occasion).height == 1
    assert ctx.facts["choices"]["chosen_added_to_set"] == 1


def test_stale_shelf_snapshot_falls_back_to_recent_sales():
    world = ChoiceWorld()
    three_products(world)
    later = MONDAY + timedelta(days=40)
    world.visit("S1", at(later - timedelta(days=3)), None, [("b1", 1, 3.0)])
    occasion = world.visit("S1", at(later), "card1", [("c1", 1, 4.0)])
    frame = choices_frame(world.build())
    # the 40-day-old snapshot is past choice_set_window_days (28): B was sold since, A was not
    assert frame.filter(pl.col("occasion") == occasion)["alternative"].to_list() == ["B", "C"]
    assert row(frame, occasion, "C")["added_to_set"]


def test_loyalty_starts_from_burn_in_shares_and_follows_the_recursion():
    world = ChoiceWorld()
    three_products(world)
    day0 = date(2024, 1, 1)
    world.shelf.clear()
    for week in range(3):
        for sku, price in (("a1", 2.0), ("b1", 3.0), ("c1", 4.0)):
            world.shelf_price("S1", day0 + timedelta(days=7 * week), sku, price)
    for offset, sku in ((0, "a1"), (2, "b1"), (4, "a1"), (9, "a1"), (11, "b1"), (14, "c1")):
        world.visit("S1", at(day0 + timedelta(days=offset)), "card1", [(sku, 1, 1.0)])
    frame = choices_frame(world.build({"choices": {"loyalty_burn_in_days": 7}}))
    frame = frame.sort("occasion_at")
    loyalty = {(r["occasion_at"].day, r["alternative"]): r["loyalty"] for r in frame.to_dicts()}
    # Guadagni & Little (1983): L(n) = lambda L(n-1) + (1 - lambda) x(n), lambda = 0.5;
    # burn-in (days 1-7) bought A, B, A -> L(0) = (2/3, 1/3, 0)
    expected = {
        (10, "A"): 2 / 3,
        (10, "B"): 1 / 3,
        (10, "C"): 0.0,
        (12, "A"): 0.5 * 2 / 3 + 0.5,
        (12, "B"): 0.5 / 3,
        (12, "C"): 0.0,
        (15, "A"): 0.5 * (0.5 * 2 / 3 + 0.5),
        (15, "B"): 0.5 * 0.5 / 3 + 0.5,
        (15, "C"): 0.0,
    }
    for key, value in expected.items():
        assert loyalty[key] == pytest.approx(value, abs=1e-12), key
    assert all(loyalty[(day, alt)] is None for day in (1, 3, 5) for alt in "ABC")
    assert frame.filter(pl.col("occasion_at").dt.day() < 8)["burn_in"].all()
    first_after = frame.filter(pl.col("occasion_at").dt.day() == 10)
    assert first_after["purchase_count"].to_list() == [3, 3, 3]
    assert first_after["days_since_last_purchase"].to_list() == [5, 5, 5]


def test_each_chooser_has_a_loyalty_of_their_own():
    # the history tables key choosers by a number (044): two choosers buying the same days
    # must each follow their own recursion, L(n) = lambda L(n-1) + (1 - lambda) x(n) with
    # lambda = 0.5 (Guadagni & Little 1983), L(0) = 0 without a burn-in window
    world = ChoiceWorld()
    three_products(world)
    bought = {"card1": ["a1", "b1", "a1", "a1"], "card2": ["b1", "b1", "c1", "b1"]}
    for card, skus in bought.items():
        for n, sku in enumerate(skus):
            world.visit(
                "S1", at(MONDAY + timedelta(days=2 * n), 10 + int(card[-1])), card, [(sku, 1, 1.0)]
            )
    frame = choices_frame(world.build()).sort("occasion_at")
    for hour, skus in ((11, bought["card1"]), (12, bought["card2"])):
        own = frame.filter(pl.col("occasion_at").dt.hour() == hour)
        level = dict.fromkeys("ABC", 0.0)
        for n, sku in enumerate(skus):
            rows = own.filter(pl.col("occasion_at").dt.day() == MONDAY.day + 2 * n)
            got = dict(zip(rows["alternative"], rows["loyalty"], strict=True))
            assert got == pytest.approx(level, abs=1e-12), (hour, n)
            level = {
                alt: 0.5 * value + 0.5 * (alt == sku[0].upper()) for alt, value in level.items()
            }


def test_loyalty_closed_form_matches_the_recursion_across_blocks():
    # lambda = 0.5 gives blocks of 865 purchases: 2000 purchases cross two block boundaries
    world = ChoiceWorld(shelf=None)
    world.product("a1", "A", 1)
    world.product("b1", "B", 2)
    world.store("S1")
    pattern = [
        "a1" if int(hashlib.md5(str(n).encode()).hexdigest(), 16) % 5 < 3 else "b1"
        for n in range(2000)
    ]
    for n, sku in enumerate(pattern):
        world.visit("S1", at(date(2020, 1, 1) + timedelta(days=n)), "card1", [(sku, 1, 1.0)])
    frame = choices_frame(world.build()).sort("occasion_at", "alternative")
    got = frame.filter(pl.col("alternative") == "A")["loyalty"].to_list()
    # reference: the recursion itself, L(0) = 0, run step by step
    level, expected = 0.0, []
    for sku in pattern:
        expected.append(level)
        level = 0.5 * level + 0.5 * (sku == "a1")
    # the first occasion's set holds A only if A was chosen; compare where A is in the set
    in_set = frame.filter(pl.col("alternative") == "A")["occasion_at"].to_list()
    days = [(t.date() - date(2020, 1, 1)).days for t in in_set]
    assert max(abs(got[i] - expected[d]) for i, d in enumerate(days)) < 1e-12
    assert len(days) >= 1999


def test_previous_choice_and_days_since_come_from_earlier_visits_only():
    world = ChoiceWorld()
    three_products(world)
    first = world.visit("S1", at(MONDAY), "card1", [("b1", 1, 3.0)])
    second = world.visit("S1", at(MONDAY + timedelta(days=3)), "card1", [("a1", 1, 2.0)])
    frame = choices_frame(world.build())
    assert [row(frame, first, alt)["previous_choice"] for alt in "ABC"] == [False] * 3
    assert row(frame, first, "A")["days_since_last_purchase"] is None
    assert [row(frame, second, alt)["previous_choice"] for alt in "ABC"] == [False, True, False]
    assert row(frame, second, "C")["days_since_last_purchase"] == 3


def test_visits_at_the_same_time_follow_their_visit_ids():
    # two receipts of one card in the same minute: the history orders them by visit id, so the
    # one with the larger id sees the other as its previous purchase, and never the reverse
    world = ChoiceWorld()
    three_products(world)
    visits = {
        world.visit("S1", at(MONDAY), "card1", [("a1", 1, 2.0)]): "A",
        world.visit("S1", at(MONDAY), "card1", [("b1", 1, 3.0)]): "B",
    }
    first, second = sorted(visits)
    frame = choices_frame(world.build())
    assert [row(frame, first, alt)["previous_choice"] for alt in "ABC"] == [False] * 3
    previous = [row(frame, second, alt)["previous_choice"] for alt in "ABC"]
    assert previous == [alt == visits[first] for alt in "ABC"]
    assert row(frame, second, "A")["purchase_count"] == 1
    assert row(frame, first, "A")["purchase_count"] == 0


def test_products_outside_the_universe_become_fringe_or_outside():
    world = ChoiceWorld()
    three_products(world)
    world.universe = [
        {"product": "A", "kept": True},
        {"product": "B", "kept": True},
        {"product": "C", "kept": False},
    ]
    occasion = world.visit("S1", at(MONDAY), "card1", [("c1", 1, 4.0)])
    fringe = choices_frame(
        world.build({"products": {**_products(), "universe": {"rest": "fringe"}}})
    )
    assert row(fringe, occasion, "fringe")["chosen"]
    assert row(fringe, occasion, "fringe")["firm"] is None
    assert row(fringe, occasion, "fringe")["price"] == 4.0
    ctx = world.build(
        {
            "products": {**_products(), "universe": {"rest": "outside"}},
            "choices": {"occasions": "all_visits"},
        }
    )
    outside = choices_frame(ctx)
    assert row(outside, occasion, "none")["chosen"]
    assert set(outside["alternative"]) == {"A", "B", "none"}
    assert ctx.facts["choices"]["outside_universe_purchase_visits"] == 1


def _products() -> dict:
    return {"keys": ["brand"], "firm": "firm", "characteristics": ["strength"]}


def test_characteristics_and_demographics_are_carried():
    world = ChoiceWorld()
    three_products(world)
    world.household("card1", income="high")
    occasion = world.visit("S1", at(MONDAY), "card1", [("a1", 1, 2.0)])
    ctx = world.build({"choices": {"demographics": ["income"]}})
    frame = choices_frame(ctx)
    assert [row(frame, occasion, alt)["strength"] for alt in "ABC"] == [1, 2, 3]
    assert row(frame, occasion, "A")["income"] == "high"
    choosers = ctx.con.execute("select income, household_known, occasions from choosers").fetchall()
    assert choosers == [("high", True, 1)]


def test_unknown_config_column_is_a_user_error():
    world = ChoiceWorld()
    three_products(world)
    world.visit("S1", at(MONDAY), "card1", [("a1", 1, 2.0)])
    with pytest.raises(UserError, match="choices.demographics names column 'age'"):
        world.build({"choices": {"demographics": ["age"]}})


def test_rebuilds_are_identical():
    world, _, _ = fallback_world()
    first = choices_frame(world.build())
    second = choices_frame(world.build())
    assert first.equals(second)


def test_schema_rejects_two_chosen_rows_in_one_occasion():
    world, first, _ = multi_purchase_world()
    frame = choices_frame(world.build())
    broken = frame.with_columns(
        chosen=pl.when(pl.col("occasion") == first).then(True).otherwise(pl.col("chosen"))
    )
    validate_frame(frame, Choices, "choices")
    with pytest.raises(UserError, match="exactly one chosen row per occasion"):
        validate_frame(broken, Choices, "choices")


def test_validation_checks_occasions_beyond_the_pandera_sample():
    world, first, _ = multi_purchase_world()
    ctx = world.build()
    # 3 rows per occasion, a sample of 2 rows: pandera sees no whole occasion, the SQL sees all
    assert validate_choices(ctx.con, sample_rows=2) == 6
    ctx.con.execute("update choices set chosen = true where occasion = ?", [first])
    with pytest.raises(UserError, match="exactly one chosen row per occasion"):
        validate_choices(ctx.con, sample_rows=2)


def test_receipts_without_cards_give_empty_tables_and_a_warning():
    world = ChoiceWorld()
    three_products(world)
    world.visit("S1", at(MONDAY), None, [("a1", 1, 2.0)])
    ctx = world.build()
    assert ctx.con.execute("select count(*) from choices").fetchone()[0] == 0
    assert ctx.con.execute("select count(*) from choosers").fetchone()[0] == 0
    assert any("no choice occasions" in w for w in ctx.warnings)


def test_a_product_named_like_the_outside_option_is_a_user_error():
    world = ChoiceWorld()
    three_products(world)
    world.product("n1", "none", 1)
    world.visit("S1", at(MONDAY), "card1", [("a1", 1, 2.0)])
    with pytest.raises(UserError, match="a product of the catalogue is named 'none'"):
        world.build()


def test_receipt_numbers_restarting_daily_are_separate_visits_of_the_market_identity():
    world = ChoiceWorld()
    three_products(world)
    # each day the till starts again at receipt 1: two visits of card1, two of card2
    days = (MONDAY, MONDAY + timedelta(days=1))
    bought = {("card1", days[0]): "a1", ("card1", days[1]): "c1"}
    for day in days:
        world.visit("S1", at(day), "card1", [(bought["card1", day], 1, 2.0)], receipt="1")
        world.visit("S1", at(day, 11), "card2", [("b1", 1, 3.0)], receipt="2")
    frame = choices_frame(world.build())
    chosen = frame.filter(pl.col("chosen")).sort("occasion")
    # one occasion per (store, business day, receipt), computed here from the lines
    triples = sorted({(x["store"], x["sold_at"].date(), x["receipt"]) for x in world.lines})
    ids = {occasion_id(session_key(), s, r, f"{d:%Y-%m-%d}"): (s, d, r) for s, d, r in triples}
    bought = dict(zip(chosen["occasion"], chosen["alternative"], strict=True))
    assert set(bought) == set(ids)
    assert [bought[occasion] for occasion in sorted(ids, key=ids.get)] == ["A", "B", "C", "B"]
    assert chosen["quantity"].to_list() == [1.0] * 4


def test_receipt_ids_unique_per_store_keep_one_visit_across_midnight():
    world = ChoiceWorld()
    three_products(world)
    world.visit("S1", at(MONDAY, 23), "card1", [("a1", 1, 2.0)], receipt="7")
    world.visit("S1", at(MONDAY + timedelta(days=1), 0), "card1", [("a1", 1, 2.0)], receipt="7")
    frame = choices_frame(world.build({"markets": {"receipt_ids_unique_per": "store"}}))
    chosen = frame.filter(pl.col("chosen"))
    # the visit's first line's day is the id's prefix only: receipt ids here do not restart
    expected = occasion_id(session_key(), "S1", "7", f"{MONDAY:%Y-%m-%d}", day_in_identity=False)
    assert chosen["occasion"].to_list() == [expected]
    assert chosen["quantity"].to_list() == [2.0]


def session_key() -> bytes:
    """The pseudonym key the test session sets (tests/conftest.py)."""
    return os.environ["DEMANDPREP_PSEUDONYM_KEY"].encode("utf-8")


def test_receipts_with_several_cards_count_distinct_cards_only():
    # a receipt scanned with two cards is counted (and keeps the smaller card); one card on two
    # lines, or a card line beside a line without a card, is one card  # common practice, no source
    world = ChoiceWorld()
    world.product("a1", "A", 1)
    world.store("S1")
    day = datetime(2024, 1, 15, 9)
    world.visit("S1", day, "card1", [("a1", 1, 2.0)], receipt="two_cards")
    world.visit("S1", day, "card2", [("a1", 1, 2.0)], receipt="two_cards")
    world.visit("S1", day, "card3", [("a1", 1, 2.0), ("a1", 1, 2.0)], receipt="one_card")
    world.visit("S1", day, "card4", [("a1", 1, 2.0)], receipt="card_and_none")
    world.visit("S1", day, None, [("a1", 1, 2.0)], receipt="card_and_none")
    ctx = world.build()
    assert ctx.facts["choices"]["receipts_with_several_cards"] == 1
    assert ctx.facts["choices"]["card_visits"] == 3
