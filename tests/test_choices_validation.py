"""`choices` is guarded on every row by SQL twins of its pandera model's checks, and pandera
itself on a sample of whole occasions; the build stores the table in (occasion, alternative)
order, which lets the uniqueness check and the export skip a sort."""

from __future__ import annotations

from datetime import date, datetime, timedelta

import duckdb
import pyarrow as pa
import pytest
from choices_fixtures import ChoiceWorld, make_config
from export_fixtures import fill_warehouse

from demandprep.choices.build import write_choices_table
from demandprep.choices.scope import scope_params, visit_scope_params
from demandprep.choices.settings import load_choice_settings
from demandprep.choices.stages import CHOICE_STAGES
from demandprep.choices.validation import model_checks, sql_check_names, validate_choices
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.sqlfiles import LINE_COMMENT, sql_text
from demandprep.stage import run_stage
from demandprep.warehouse import insertion_order_kept

MONDAY = date(2024, 1, 15)
# the occasion the breaks below aim at: past burn-in, with earlier purchases
TARGET = "(select max(occasion) from choices where not burn_in and purchase_count > 0)"
ONE_INSIDE_ROW = (
    f"rowid = (select max(rowid) from choices where occasion = {TARGET} "
    "and alternative <> 'none' and not chosen)"
)
CHOSEN_INSIDE_ROW = (
    f"rowid = (select max(rowid) from choices where occasion = {TARGET} "
    "and alternative <> 'none' and chosen)"
)
NONE_ROW = f"occasion = {TARGET} and alternative = 'none'"
WHOLE_OCCASION = f"occasion = {TARGET}"


@pytest.fixture(scope="module")
def sorted_choices() -> pa.Table:
    """The export fixture's choices table, rows in (occasion, alternative) order."""
    con = duckdb.connect()
    fill_warehouse(con, occasions=60)
    return con.sql("select * from choices order by occasion, alternative").to_arrow_table()


def _warehouse(rows: pa.Table, order: str = "occasion, alternative") -> duckdb.DuckDBPyConnection:
    con = duckdb.connect(config={"preserve_insertion_order": True, "threads": 2})
    con.register("fixture_rows", rows)
    con.execute(f"create table choices as select * from fixture_rows order by {order}")  # noqa: S608
    con.unregister("fixture_rows")
    return con


def _message(con: duckdb.DuckDBPyConnection, **options) -> str:
    with pytest.raises(UserError) as caught:
        validate_choices(con, **options)
    return caught.value.one_line()


def test_the_build_stores_choices_in_key_order():
    world = ChoiceWorld(shelf=None)
    for sku, brand in (("a1", "A"), ("b1", "B"), ("c1", "C")):
        world.product(sku, brand, 1)
    world.store("S1")
    world.store("S2")
    for n in range(24):
        store, sku = ("S1", "S2")[n % 2], ("a1", "b1", "c1")[n % 3]
        world.visit(
            store,
            datetime(2024, 1, 15, 9) + timedelta(hours=5 * n),
            f"card{n % 5}",
            [(sku, 1, 2.0)],
        )
    ctx = world.build({"choices": {"occasions": "all_visits"}})
    ctx.con.execute("set preserve_insertion_order = true")
    stored = ctx.con.execute("select occasion, alternative from choices").fetchall()
    assert len(stored) > 24
    assert stored == sorted(stored)


def _one_visit_world_before_choices() -> BuildContext:
    """A one-visit build run up to the choices stage, on two threads, order not kept."""
    world = ChoiceWorld()
    world.product("a1", "A", 1)
    world.store("S1")
    world.visit("S1", datetime(2024, 1, 15, 9), "card1", [("a1", 1, 2.0)])
    con = duckdb.connect(config={"preserve_insertion_order": False, "threads": 2})
    world.write(con)
    ctx = BuildContext(con=con, config=make_config())
    for stage in CHOICE_STAGES[:-1]:
        run_stage(stage, ctx)
    return ctx


def test_the_occasion_sets_are_written_in_order_however_many_rows():
    # a small build fits in one batch and keeps its order whatever the plan; a plan that keeps
    # insertion order shows "Batch Create Table As", one with a hash join "Create Table As"
    ctx = _one_visit_world_before_choices()
    params = {**load_choice_settings(ctx.con, ctx.config).params(), **scope_params(ctx.con)}
    text = sql_text("choices/062_choice_occasion_sets.sql")
    code = LINE_COMMENT.sub("", text)
    used = {k: v for k, v in params.items() if f"${k}" in code}
    with insertion_order_kept(ctx.con):
        plan = ctx.con.execute(f"explain {text}", used).fetchall()[0][1]
    assert "Batch Create Table As" in plan


@pytest.mark.parametrize("threads", [1, 2])
def test_the_choices_rows_are_written_in_key_order_beyond_one_row_group(threads):
    # 090 joins each occasion to its store-day's map (086), and the join's probe keeps the
    # occasions' stored order on one thread only: the table is written in key ranges of the
    # occasions, one per thread, each on one thread, committed in key order (choices/parts.py).
    # 1,200,000 occasions of one alternative fill ten of DuckDB's row groups (122,880 rows);
    # with the join on two threads this test failed (the rows came out of order), at 300,000
    # rows it still passed by luck
    ctx = _one_visit_world_before_choices()
    ctx.con.execute(f"set threads = {threads}")
    with insertion_order_kept(ctx.con):
        ctx.con.execute(
            "create or replace table choice_occasion_sets as "
            "select * replace (occasion || '-' || lpad(copy::varchar, 7, '0') as occasion) "
            "from choice_occasion_sets, range(1200000) as copies(copy) order by occasion"
        )
    write_choices_table(ctx, load_choice_settings(ctx.con, ctx.config))
    with insertion_order_kept(ctx.con):
        stored = ctx.con.execute("select occasion, alternative from choices").fetchall()
    assert len(set(stored)) == len(stored) == 1_200_000
    assert stored == sorted(stored)
    assert ctx.con.execute("select current_setting('threads')").fetchone()[0] == threads


def test_the_choices_rows_are_written_in_key_order_when_the_maps_outnumber_the_occasions():
    # an incremental build writes one week's occasions against the maps of every store-day:
    # DuckDB then estimated the occasions (after the part's range filter) below the maps and
    # built its hash table on them instead (a right join), so the rows came out in the maps'
    # order (19,153 rows out of order at 39.8M receipt lines, and the export sorted the table)
    ctx = _one_visit_world_before_choices()
    with insertion_order_kept(ctx.con):
        ctx.con.execute(
            "create or replace table choice_occasion_sets as "
            "select * replace (occasion || '-' || lpad(copy::varchar, 6, '0') as occasion, "
            "1 + hash(copy) % 60000 as store_day_index) "
            "from choice_occasion_sets, range(20000) as copies(copy) order by occasion"
        )
        ctx.con.execute(
            "create or replace table choice_store_day_info as "
            "select * replace (index as store_day_index) "
            "from choice_store_day_info, range(1, 60001) as indexes(index)"
        )
    write_choices_table(ctx, load_choice_settings(ctx.con, ctx.config))
    with insertion_order_kept(ctx.con):
        stored = ctx.con.execute("select occasion, alternative from choices").fetchall()
    assert len(stored) == 20000
    assert stored == sorted(stored)


def test_the_store_day_maps_carry_no_key_columns_per_alternative():
    # 090 copies each occasion's map entries into its rows: the store, day and alternative are
    # the occasion's own or the map's key, so repeating them per entry only costs copies
    world = ChoiceWorld()
    world.product("a1", "A", 1)
    world.store("S1")
    world.visit("S1", datetime(2024, 1, 15, 9), "card1", [("a1", 1, 2.0)])
    con = duckdb.connect()
    world.write(con)
    ctx = BuildContext(con=con, config=make_config())
    for stage in CHOICE_STAGES[:-1]:
        run_stage(stage, ctx)
    entry = con.execute(
        "select map_values(alternative_info)[1] from choice_store_day_info"
    ).fetchone()[0]
    assert not {"store", "day", "alternative"} & set(entry)
    assert {"price", "price_source", "promo", "firm", "nest", "strength"} <= set(entry)
    assert entry["price"] == 2.0


def test_every_check_of_the_model_has_its_sql_twin():
    # the SQL must enforce each check pandera would, or the sample alone would guard it
    assert model_checks() <= sql_check_names()
    assert "chosen__not_nullable" in model_checks()
    assert "one_chosen_per_occasion" in model_checks()
    assert "price__greater_than_or_equal_to" in model_checks()


def test_an_unbroken_table_passes_in_or_out_of_key_order(sorted_choices):
    assert validate_choices(_warehouse(sorted_choices), sample_rows=0) == 420
    shuffled = _warehouse(sorted_choices, order="hash(occasion, alternative)")
    assert validate_choices(shuffled, sample_rows=0) == 420


BREAKS = [
    ("occasion = null", ONE_INSIDE_ROW, "occasion: not_nullable"),
    ("store = null", WHOLE_OCCASION, "store: not_nullable"),
    ("chosen = null", ONE_INSIDE_ROW, "chosen: not_nullable"),
    ("previous_choice = null", ONE_INSIDE_ROW, "previous_choice: not_nullable"),
    ("household_known = null", ONE_INSIDE_ROW, "household_known: not_nullable"),
    (
        "chooser = 'CARD-0001' || repeat('0', 23)",
        WHOLE_OCCASION,
        "chooser: str_matches('^[0-9a-f]{32}$')",
    ),
    ("choice_set_size = 0", WHOLE_OCCASION, "choice_set_size: greater_than_or_equal_to(1)"),
    ("price = -1.0", ONE_INSIDE_ROW, "price: greater_than_or_equal_to(0)"),
    ("price_source = 'guessed'", ONE_INSIDE_ROW, "price_source: isin("),
    ("loyalty = -0.5", ONE_INSIDE_ROW, "loyalty: greater_than_or_equal_to(0)"),
    ("loyalty = 1.5", ONE_INSIDE_ROW, "loyalty: less_than_or_equal_to(1.000000001)"),
    (
        "days_since_last_purchase = -1",
        WHOLE_OCCASION,
        "days_since_last_purchase: greater_than_or_equal_to(0)",
    ),
    ("purchase_count = -1", WHOLE_OCCASION, "purchase_count: greater_than_or_equal_to(0)"),
    ("chosen = true", ONE_INSIDE_ROW, "exactly one chosen row per occasion"),
    ("chosen = false", CHOSEN_INSIDE_ROW, "exactly one chosen row per occasion"),
    ("choice_set_size = 8", WHOLE_OCCASION, "no more rows than the choice set"),
    ("choice_set_size = 6", WHOLE_OCCASION, "no more rows than the choice set"),
    ("price = null", ONE_INSIDE_ROW, "price is null exactly where price_source is missing"),
    ("promo = null", ONE_INSIDE_ROW, "promo is null only on unpriced rows"),
    ("price_source = 'outside'", ONE_INSIDE_ROW, "'outside' price source exactly on the 'none'"),
    ("price_source = 'missing'", NONE_ROW, "'outside' price source exactly on the 'none'"),
    ("firm = null", ONE_INSIDE_ROW, "firm is null only for 'fringe' and 'none'"),
    ("quantity = 1.0", ONE_INSIDE_ROW, "quantity and spend set exactly on the chosen inside row"),
    ("spend = null", CHOSEN_INSIDE_ROW, "quantity and spend set exactly on the chosen inside"),
    ("added_to_set = true", ONE_INSIDE_ROW, "only the chosen alternative is ever added"),
    ("loyalty = null", ONE_INSIDE_ROW, "loyalty is null exactly on burn-in occasions"),
    (
        "days_since_last_purchase = null",
        WHOLE_OCCASION,
        "days_since_last_purchase is null exactly when purchase_count = 0",
    ),
    ("previous_choice = true", NONE_ROW, "previous_choice never on 'none'"),
    ("store = 'S99'", ONE_INSIDE_ROW, "occasion-level columns constant within the occasion"),
    ("holdout = not holdout", ONE_INSIDE_ROW, "occasion-level columns constant"),
    ("occasion_at = null", ONE_INSIDE_ROW, "occasion-level columns constant"),
    # one row's chooser broken: the occasion's chooser is no longer constant
    ("chooser = 'ffff' || chooser[5:]", ONE_INSIDE_ROW, "occasion-level columns constant"),
]


@pytest.mark.parametrize(("assignment", "where", "expected"), BREAKS)
def test_a_broken_row_fails_naming_its_check(sorted_choices, assignment, where, expected):
    con = _warehouse(sorted_choices)
    con.execute(f"update choices set {assignment} where {where}")  # noqa: S608
    # no pandera sample: the SQL twins alone must find it
    message = _message(con, sample_rows=0)
    assert message.startswith("stage output 'choices' breaks its schema Choices: ")
    assert expected in message


def test_a_repeated_alternative_fails_whether_stored_next_to_its_twin_or_not(sorted_choices):
    ordered = f"select alternative from choices where occasion = {TARGET} order by alternative"  # noqa: S608
    # the second alternative renamed to the first stays in key order (the twins are neighbours);
    # the third renamed to the first breaks the order, so the check groups the pairs instead
    for position in (1, 2):
        con = _warehouse(sorted_choices)
        alternatives = [r[0] for r in con.execute(ordered).fetchall()]
        con.execute(
            f"update choices set alternative = ? where occasion = {TARGET} and alternative = ?",  # noqa: S608
            [alternatives[0], alternatives[position]],
        )
        assert "each alternative at most once per occasion" in _message(con, sample_rows=0)


def test_a_wrong_column_type_fails_in_the_pandera_sample(sorted_choices):
    con = _warehouse(sorted_choices)
    con.execute("alter table choices alter choice_set_size type integer")
    assert "choice_set_size" in _message(con, sample_rows=0)


def test_the_pandera_sample_shows_the_failing_value(sorted_choices):
    con = _warehouse(sorted_choices)
    first = "(select min(occasion) from choices)"
    con.execute(
        f"update choices set price_source = 'guessed' where occasion = {first} "  # noqa: S608
        "and alternative <> 'none'"
    )
    assert "(value 'guessed')" in _message(con, sample_rows=10)


def test_an_empty_table_passes():
    con = duckdb.connect()
    fill_warehouse(con, occasions=60)
    con.execute("delete from choices")
    assert validate_choices(con) == 0


def _choice_plans(*names: str) -> dict[str, str]:
    """The physical plans of choice SQL files, on a small build run up to the last stage."""
    world = ChoiceWorld()
    world.product("a1", "A", 1)
    world.product("b1", "B", 1)
    world.store("S1")
    for n in range(4):
        world.visit("S1", datetime(2024, 1, 15, 9) + timedelta(days=n), "card1", [("a1", 1, 2.0)])
    con = duckdb.connect()
    world.write(con)
    ctx = BuildContext(con=con, config=make_config())
    for stage in CHOICE_STAGES[:-1]:
        run_stage(stage, ctx)
    settings = load_choice_settings(con, ctx.config).params()
    params = {**settings, **scope_params(con), **visit_scope_params(con)}
    plans = {}
    for name in names:
        text = sql_text(f"choices/{name}.sql")
        code = LINE_COMMENT.sub("", text)
        used = {k: v for k, v in params.items() if f"${k}" in code}
        plans[name] = con.execute(f"explain {text}", used).fetchall()[0][1]
    return plans


def test_the_visit_history_orders_each_chooser_once():
    # every window of 045 shares one partition and order, so DuckDB sorts the visits once; a
    # second window operator would sort them again (the chooser's first day is a grouping)
    plan = _choice_plans("045_choice_visit_history")["045_choice_visit_history"]
    assert plan.count("─ Window ") == 1


def test_the_occasion_sets_take_the_previous_purchase_from_the_history():
    # 045 carries what the previous purchase visit bought through its window, so 062 neither
    # groups the occasions by visit nor joins them on the long visit id a second time
    plan = _choice_plans("062_choice_occasion_sets")["062_choice_occasion_sets"]
    assert "Group By" not in plan
