"""Chooser pseudonyms, the key they need, the holdout flag, and no raw card id in any output."""

from __future__ import annotations

import hashlib
import hmac
from datetime import date, datetime, timedelta

import duckdb
import polars as pl
import pytest
from choices_fixtures import KEY_ENV, ChoiceWorld, choices_frame, make_config

from demandprep.choices.pseudonyms import chooser_pseudonym
from demandprep.choices.stages import CHOICE_STAGES
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.stage import run_stage

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
    assert "choice_chooser_numbers" not in tables
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


@pytest.mark.parametrize("key", ["k", "fifteen-bytes-k", " " * 24, "  padded-key-14  \n"])
def test_short_key_stops_the_build_naming_the_variable(monkeypatch, key):
    monkeypatch.setenv(KEY_ENV, key)
    world = small_world()
    con = duckdb.connect()
    with pytest.raises(UserError) as raised:
        world.build(con=con)
    assert raised.value.one_line() == (
        f"environment variable {KEY_ENV} holds a pseudonym key shorter than 16 bytes (spaces "
        "aside); anyone holding the card ids could then guess the key and recompute the "
        f"pseudonyms. Hint: set {KEY_ENV} to a long random secret, made for instance with "
        'python -c "import secrets; print(secrets.token_hex(32))".'
    )
    # nothing of the choice build was made
    assert con.sql("from duckdb_tables() where table_name like 'choice%'").fetchall() == []


def test_sixteen_byte_key_is_enough(monkeypatch):
    monkeypatch.setenv(KEY_ENV, "sixteen-bytes-ke")
    assert choices_frame(small_world().build()).height == 6


def test_occasion_is_a_keyed_hash_of_store_day_and_receipt(monkeypatch):
    monkeypatch.setenv(KEY_ENV, "occasion-key-0123456789abcdef")
    frame = choices_frame(small_world().build())
    # reference: Python's hmac module over "occasion", NUL, store, NUL, business day, NUL,
    # receipt (receipt ids restart daily by default); the chooser hashes the bare card id, so
    # the label keeps the two kinds of hash apart; the id starts with the visit's day
    expected = {
        "2024-01-15:"
        + hmac.new(
            b"occasion-key-0123456789abcdef",
            b"occasion\x00S1\x002024-01-15\x00" + f"R{n:05d}".encode(),
            hashlib.sha256,
        ).hexdigest()[:32]
        for n in (1, 2, 3)
    }
    assert set(frame["occasion"]) == expected
    again = choices_frame(small_world().build())
    assert again["occasion"].to_list() == frame["occasion"].to_list()


def test_no_card_to_chooser_link_outlives_a_killed_build(tmp_path):
    for stages in range(1, len(CHOICE_STAGES)):
        path = tmp_path / f"killed_after_{stages}.duckdb"
        con = duckdb.connect(str(path))
        small_world().write(con)
        ctx = BuildContext(con=con, config=make_config())
        for stage in CHOICE_STAGES[:stages]:
            run_stage(stage, ctx)
        con.close()  # the build dies here: its connection goes with it
        con = duckdb.connect(str(path))
        linking = con.execute(
            "select table_name from duckdb_columns() where table_name like 'choice%' "
            "and column_name = 'card'"
        ).fetchall()
        con.close()
        assert linking == [], CHOICE_STAGES[stages - 1].name


@pytest.mark.parametrize("key", [" long-enough-key-0123456789", "long-enough-key-0123456789\n"])
def test_a_key_with_spaces_at_its_ends_is_refused(monkeypatch, key):
    # before: the length check stripped them but the hash did not, so a key set once with a
    # trailing newline and once without gave two sets of chooser ids without a word
    monkeypatch.setenv(KEY_ENV, key)
    with pytest.raises(UserError) as raised:
        small_world().build()
    assert raised.value.one_line().startswith(
        f"environment variable {KEY_ENV} holds a pseudonym key with spaces or a line break at "
        "its start or end"
    )


def test_a_build_with_choices_turned_off_drops_their_tables_from_the_warehouse(
    tmp_path, coffee_sample, monkeypatch
):
    # before: the pseudonymised choice tables of the last build with choices stayed in the
    # warehouse, unused and stale, after choices were turned off (data minimisation)
    import shutil

    from demandprep import pipeline
    from demandprep.config import load_config

    folder = tmp_path / "world"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    path = folder / "demandprep.toml"
    config = load_config(path)
    monkeypatch.setenv(config.choices.pseudonym_key_env, "a-test-key-0123456789abcdef")
    pipeline.run_ingest(config)
    pipeline.run_build(config)
    assert {"choices", "choosers"} <= warehouse_tables(config.warehouse.path)
    text = path.read_text(encoding="utf-8")
    path.write_text(text.replace("[choices]\nenabled = true", "[choices]\nenabled = false"))
    pipeline.run_build(load_config(path))
    left = warehouse_tables(config.warehouse.path)
    assert not {"choices", "choosers"} & left
    assert not [table for table in left if table.startswith("choice_")]


def warehouse_tables(path) -> set[str]:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return {row[0] for row in con.execute("select table_name from duckdb_tables()").fetchall()}
    finally:
        con.close()
