"""Chooser pseudonyms, the key they need, the holdout flag, and no raw card id in any output."""

from __future__ import annotations

import hashlib
import hmac
from datetime import date, datetime, timedelta

import polars as pl
import pytest
from choices_fixtures import KEY_ENV, ChoiceWorld, choices_frame

from demandprep.choices.pseudonyms import chooser_pseudonym
from demandprep.errors import UserError

DAY = date(2024, 1, 15)


def small_world(cards: int = 3) -> ChoiceWorld:
    world = ChoiceWorld()
    world.product("a1", "A", 1)
    world.product("b1", "B", 2)
    world.store("S1")
    world.shelf_price("S1", DAY, "a1", 2.0)
    world.shelf_price("S1", DAY, "b1", 3.0)
    for n in range(cards):
        card = f"6{n:015d}"
        world.household(card)
        at = datetime(2024, 1, 15, 8) + timedelta(minutes=n)
        world.visit("S1", at, card, [("a1" if n % 2 else "b1", 1, 2.0)])
    return world


def test_missing_key_stops_the_build_naming_the_variable(monkeypatch):
    monkeypatch.delenv(KEY_ENV, raising=False)
    with pytest.raises(UserError, match=f"environment variable {KEY_ENV} is not set"):
        small_world().build()


def test_chooser_is_the_truncated_hmac_sha256_of_the_card():
    # reference: HMAC-SHA256("key", "The quick brown fox jumps over the lazy dog") (RFC 2104
    # construction; the digest is the widely quoted example value, from memory)
    quoted = "f7bc83f430538424b13298e6aa6fb143ef4d59a14946175997479dbc2d1a3cd8"
    assert chooser_pseudonym(b"key", "The quick brown fox jumps over the lazy dog") == quoted[:32]
    # reference: Python's hmac module
    expected = hmac.new(b"k2", b"6000000000000001", hashlib.sha256).hexdigest()[:32]
    assert chooser_pseudonym(b"k2", "6000000000000001") == expected


def test_choosers_are_keyed_pseudonyms_of_the_cards(monkeypatch):
    monkeypatch.setenv(KEY_ENV, "first-key-0123456789abcdef")
    first = choices_frame(small_world().build())
    expected = {chooser_pseudonym(b"first-key-0123456789abcdef", f"6{n:015d}") for n in range(3)}
    assert set(first["chooser"]) == expected
    monkeypatch.setenv(KEY_ENV, "second-key-0123456789abcdef")
    second = choices_frame(small_world().build())
    assert set(second["chooser"]).isdisjoint(set(first["chooser"]))


def test_no_raw_card_id_appears_in_any_output():
    world = small_world(cards=5)
    ctx = world.build({"choices": {"demographics": ["income"]}})
    cards = {line["card"] for line in world.lines if line["card"]}
    for table in ("choices", "choosers"):
        frame = pl.from_arrow(ctx.con.sql(f"select * from {table}").to_arrow_table())
        text = [c for c, t in frame.schema.items() if t == pl.String]
        values = set().union(*(set(frame[c].drop_nulls()) for c in text))
        assert not any(card in value for value in values for card in cards), table
    # the card -> chooser map is dropped with the other working tables
    tables = {
        r[0] for r in ctx.con.execute("select table_name from information_schema.tables").fetchall()
    }
    assert "choice_pseudonyms" not in tables
    assert tables >= {"choices", "choosers"}


def test_holdout_is_fixed_per_chooser_and_near_the_fraction():
    world = small_world(cards=400)
    ctx = world.build({"choices": {"holdout_fraction": 0.25}})
    choosers = pl.from_arrow(ctx.con.sql("select chooser, holdout from choosers").to_arrow_table())
    share = choosers["holdout"].mean()
    # binomial sd sqrt(0.25 * 0.75 / 400) = 0.022; four sd (common practice, no source)
    assert abs(share - 0.25) < 4 * 0.022
    again = world.build({"choices": {"holdout_fraction": 0.25}})
    same = pl.from_arrow(again.con.sql("select chooser, holdout from choosers").to_arrow_table())
    assert choosers.sort("chooser").equals(same.sort("chooser"))
    per_row = choices_frame(ctx).group_by("chooser").agg(pl.col("holdout").n_unique())
    assert per_row["holdout"].max() == 1
