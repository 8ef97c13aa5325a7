"""The chooser-alternative build's stage functions: each runs static SQL from sql/choices/.

Order: inputs (alternatives, shelf prices, category lines) -> occasions (visits, pseudonyms,
multiple-purchase policy) -> history (previous purchase, loyalty) -> choosers -> sets
(availability, sampling, prices, attributes) -> choices (assembled, validated, counted).
Nothing long-table-sized is sorted: the per-occasion table choice_occasion_sets is joined to
everything its rows need (choosers included) and sorted by occasion, and `choices` unnests it
with its store-day's map (`write_choices_table`), so its rows are stored in (occasion,
alternative) order, the export's order.
Intermediate tables are named choice_*; the last stage drops them, the card -> chooser map first
(the incremental build's state, choice_state*, stays: `scope.py`).
"""

from __future__ import annotations

import duckdb

from demandprep.choices.facts import choice_facts, warn_on_facts
from demandprep.choices.file_state import drop_file_state, rows_changing
from demandprep.choices.inputs import create_input_views, drop_input_views
from demandprep.choices.kept_sales import stage_choice_sales
from demandprep.choices.kept_visits import drop_kept, merge_scoped, restore_kept
from demandprep.choices.parts import occasion_bounds, write_in_parts
from demandprep.choices.pseudonyms import (
    build_pseudonym_table,
    occasion_hash_parameters,
    pseudonym_key,
)
from demandprep.choices.report_counts import count_choice_days, counts_missing, drop_report_counts
from demandprep.choices.scope import (
    drop_choice_state,
    first_rebuilt_id,
    forget_choice_state,
    plan_choice_scope,
    plan_visit_scope,
    scope_params,
    store_choice_state,
    visit_scope_params,
)
from demandprep.choices.settings import FRINGE, OUTSIDE, ChoiceSettings, load_choice_settings
from demandprep.choices.validation import validate_choices
from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.market.checks import refuse_key_separators
from demandprep.schemas.choices import Choosers
from demandprep.sqlfiles import run_sql
from demandprep.validate import validate_table
from demandprep.warehouse import (
    insertion_order_kept,
    join_sides_kept,
    one_thread,
    threads_of,
)

INTERMEDIATE_TABLES = (
    "choice_pseudonyms",
    "choice_cards",
    "choice_universe",
    "choice_sku_key_values",
    "choice_sku_products",
    "choice_alternative_map",
    "choice_shelf",
    "choice_sales",
    "choice_calendar",
    "choice_store_regions",
    "choice_visits",
    "choice_visit_purchases",
    "choice_occasions",
    "choice_chooser_numbers",
    "choice_visit_history",
    "choice_loyalty_start",
    "choice_loyalty_events",
    "choice_loyalty_values",
    "choice_store_day_sales",
    "choice_store_period_prices",
    "choice_region_period_prices",
    "choice_store_days",
    "choice_visit_loyalty",
    "choice_set_candidates",
    "choice_store_day_sets",
    "choice_occasion_sets",
    "choice_alternative_prices",
    "choice_alternative_attributes",
    "choice_store_day_info",
    "choice_store_day_markets",
    "choice_build_scope",
    "choice_visit_scope",
    "choice_scoped_visits",
    "choice_scoped_visit_purchases",
    "choice_scoped_occasions",
    "choice_scoped_sales",
)


def _settings(ctx: BuildContext) -> ChoiceSettings:
    return load_choice_settings(ctx.con, ctx.config)


def _run(ctx: BuildContext, settings: ChoiceSettings, *names: str) -> None:
    _run_on(ctx.con, settings.params(), *names)


def _run_on(con: duckdb.DuckDBPyConnection, params: dict[str, object], *names: str) -> None:
    for name in names:
        run_sql(con, f"choices/{name}.sql", params)


def _found(ctx: BuildContext, settings: ChoiceSettings, name: str) -> list[tuple]:
    """The rows of one SQL file of sql/choices/ that finds something wrong."""
    return run_sql(ctx.con, f"choices/{name}.sql", settings.params()).fetchall()


def prepare_choice_inputs(ctx: BuildContext) -> None:
    """Check key and settings; map SKUs to alternatives; stage shelf prices; plan which days
    this build makes again (`scope.py`) and stage the category's lines (`kept_sales.py`)."""
    # the key first: a missing or short key stops the build before it writes anything
    pseudonym_key(ctx.config.choices.pseudonym_key_env)
    settings = _settings(ctx)
    if not settings.has_universe and ctx.config.market_build_enabled:
        ctx.warn(
            "no product_universe table (market build): every category product is an "
            "alternative of its own in the choice build."
        )
    # absent optional inputs (households, shelf prices, market build) read as empty views
    create_input_views(ctx.con, ctx.config.market_build_enabled)
    _run(ctx, settings, *INPUT_FILES)
    refuse_key_separators(_found(ctx, settings, "009_choice_key_separators"))
    _check_reserved_alternatives(ctx)
    _check_universe_matches(ctx, settings)
    plan_visit_scope(ctx, settings)
    scope = visit_scope_params(ctx.con)
    stage_choice_sales(ctx.con, scope["every_visit"], scope["visits_from"])


INPUT_FILES = (
    "005_choice_universe",
    "007_choice_sku_key_values",
    "008_choice_sku_products",
    "010_choice_alternative_map",
    "015_choice_shelf",
    "024_choice_period_start",
    "025_choice_calendar",
    "027_choice_store_regions",
)


def _check_reserved_alternatives(ctx: BuildContext) -> None:
    clash = ctx.con.execute(
        "select min(product) from choice_alternative_map where product in ($outside, $fringe)",
        {"outside": OUTSIDE, "fringe": FRINGE},
    ).fetchone()[0]
    if clash is not None:
        raise UserError(
            f"a product of the catalogue is named {clash!r}, the name the choice build gives "
            "the outside option or the composite of the other products.",
            "change that product's key values in the catalogue.",
        )


def _check_universe_matches(ctx: BuildContext, settings: ChoiceSettings) -> None:
    if not settings.has_universe:
        return
    unmatched = ctx.con.execute(
        "select count(*) from choice_universe where kept "
        "and product not in (select product from choice_alternative_map)"
    ).fetchone()[0]
    if unmatched:
        ctx.warn(
            f"{unmatched} kept products of product_universe match no catalogue SKU of the "
            "category in the choice build (product ids built differently?)."
        )


def build_choice_occasions(ctx: BuildContext) -> None:
    """Card visits (keyed-hash ids), chooser pseudonyms and the occasions after the policy:
    those of the days this build makes again, with the kept ones of earlier days
    (`kept_visits.py`; every one in a full build).

    After 032 no persistent choice_* table holds a card id (the card -> chooser map is TEMP).
    """
    settings = _settings(ctx)
    key = pseudonym_key(ctx.config.choices.pseudonym_key_env)
    scope = visit_scope_params(ctx.con)  # planned by the inputs stage
    if scope["every_visit"]:
        drop_kept(ctx.con)
        offset = 0
    else:
        offset = restore_kept(ctx.con, scope["visits_from"])
    params = {
        **settings.params(),
        **occasion_hash_parameters(key),
        "visits_from": scope["visits_from"],
        "visit_number_offset": offset,
    }
    made_again = scope["every_visit"] or scope["visits_from"] is not None
    if made_again:
        run_sql(ctx.con, "choices/030_choice_visits.sql", params)
    holdout = ctx.config.choices.holdout_fraction
    build_pseudonym_table(ctx.con, key, holdout, every_visit=scope["every_visit"])
    if not made_again:
        return  # no receipts file arrived or left: every visit is kept
    for name in AFTER_PSEUDONYMS:
        run_sql(ctx.con, f"choices/{name}.sql", params)
    merge_scoped(ctx.con, scope["every_visit"])


AFTER_PSEUDONYMS = (
    "032_choice_visit_choosers",
    "035_choice_visit_purchases",
    "040_choice_occasions",
)


def build_choice_history(ctx: BuildContext) -> None:
    """Each occasion's history from earlier occasions: previous purchase, counts, and the
    loyalty events the values are made of (`build_choice_sets` values the ranks it needs).
    The kept visits' history is kept too (`kept_visits.HISTORY_TABLES`): 045 makes that of the
    visits made again, from the kept rows of each chooser's earlier visits."""
    settings = _settings(ctx)
    scope = visit_scope_params(ctx.con)  # the kept history stops where the visits made start
    made = {"every_visit": scope["every_visit"], "visits_from": scope["visits_from"]}
    _run_on(
        ctx.con,
        {**settings.params(), **made},
        "043_choice_history_tables",
        "044_choice_chooser_numbers",
        "045_choice_visit_history",
    )
    _run(ctx, settings, "046_choice_loyalty_start", "047_choice_loyalty_events")


def build_choice_sets(ctx: BuildContext) -> None:
    """Choice sets per occasion (sampled if configured) and alternative prices and attributes,
    for the occasions this build recomputes (`scope.py`)."""
    settings = _settings(ctx)
    _run(ctx, settings, "079_choice_store_day_markets")  # before 062, which joins it
    plan_choice_scope(ctx, settings)  # compares the store-day markets with the stored ones
    scoped = {**settings.params(), **scope_params(ctx.con)}
    # the sales, prices and sets the recomputed occasions read; the store-days all (the facts
    # count them, and their numbers must not change with the scope)
    _run_on(
        ctx.con,
        scoped,
        "050_choice_store_day_sales",
        "052_choice_store_period_prices",
        "054_choice_region_period_prices",
        "055_choice_store_days",
        "060_choice_set_candidates",
        "061_choice_store_day_sets",
    )
    # loyalty only for the ranks the recomputed occasions read (048)
    _run_on(ctx.con, scoped, "048_choice_loyalty_values", "049_choice_visit_loyalty")
    # stored sorted by occasion, so that `choices` is written in key order (see 090)
    with insertion_order_kept(ctx.con):
        _run_on(ctx.con, scoped, "062_choice_occasion_sets")
    # prices and price maps only for the store-days of those occasions
    _run_on(
        ctx.con,
        scoped,
        "070_choice_alternative_prices",
        "075_choice_alternative_attributes",
        "078_choice_store_day_info",
    )


def build_choosers(ctx: BuildContext) -> None:
    """The choosers table (pseudonym, holdout, demographics, counts), validated."""
    settings = _settings(ctx)
    _run(ctx, settings, "080_choosers")
    validate_table(ctx.con, "choosers", Choosers)


def build_choices(ctx: BuildContext) -> None:
    """The long choices table (whole, or its rows from the first recomputed day on), its new
    rows validated; records facts, stores the state for the next build and cleans up."""
    scope = scope_params(ctx.con)
    forget_choice_state(ctx.con)
    if scope["every_occasion"]:
        rows_changing(ctx.con, None)  # the last exported file keeps no row for the next
        write_choices_table(ctx, _settings(ctx))
        validate_choices(ctx.con)
        count_choice_days(ctx.con, None)
    elif scope["rebuilt_from"] is not None:
        first = first_rebuilt_id(scope["rebuilt_from"])
        rows_changing(ctx.con, first)
        ctx.con.execute("delete from choices where occasion >= $first", {"first": first})
        write_choices_table(ctx, _settings(ctx), create=False)
        validate_choices(ctx.con, checked_from=first)
        count_choice_days(ctx.con, first)
    elif counts_missing(ctx.con):
        count_choice_days(ctx.con, None)
    facts = choice_facts(ctx.con, ctx.config)
    ctx.facts["choices"] = facts
    warn_on_facts(ctx, facts)
    store_choice_state(ctx)
    drop_intermediate_tables(ctx)


def write_choices_table(ctx: BuildContext, settings: ChoiceSettings, create: bool = True) -> None:
    """090's `choices`, stored in (occasion, alternative) order: each occasion joined to its
    store-day's map (086), in as many parts of the occasions as DuckDB has threads, each part
    on one thread and all at once (`parts.py`).

    The join's cost per row does not grow with the store-days: the list of every store-day's
    map that 090 indexed before (a product with a one-row table, order kept on every thread)
    was copied by DuckDB for each batch of occasions. At 3M occasions (21,840 store-days,
    benchmarks/choices_scale.py, 4GB, 2 cores, 2026-12-03) the `choices` stage took 34.7 s
    (65.5 CPU s) with that list and 33.1 s (61.2) in two joined parts; at 10M (72,800
    store-days) the list cost twice the CPU of one join.
    """
    params = settings.params()
    _run(ctx, settings, "086_choice_occasion_maps_joined", "087_choice_rows")
    if create:
        _run(ctx, settings, "088_choices_table")

    def write_part(con: duckdb.DuckDBPyConnection, first: str, after: str | None) -> None:
        # the macros are TEMP: every connection defines its own
        _run_on(con, params, "086_choice_occasion_maps_joined", "087_choice_rows")
        part = {**params, "first_occasion": first, "after_occasion": after}
        _run_on(con, part, "090_choices")

    with insertion_order_kept(ctx.con):
        bounds = occasion_bounds(ctx.con, threads_of(ctx.con))
        # the occasions stay the probe side of 086's join even when fewer than the maps
        with one_thread(ctx.con), join_sides_kept(ctx.con):
            write_in_parts(ctx.con, bounds, write_part)
    for macro in ("choice_rows", "choice_occasion_maps"):
        ctx.con.execute(f"drop macro table if exists {macro}")


def drop_choice_tables(ctx: BuildContext) -> None:
    """Choices turned off: drop the tables of the last build that made them, and any working
    table a failed one left. They are pseudonymised personal data no build uses or updates any
    more, and turning choices back on rebuilds them whole."""
    for table in ("choices", "choosers"):
        ctx.con.execute(f"drop table if exists {table}")
    drop_choice_state(ctx.con)
    drop_file_state(ctx.con)
    drop_report_counts(ctx.con)
    drop_intermediate_tables(ctx)


def drop_intermediate_tables(ctx: BuildContext) -> None:
    """Drop the choice_* working tables (the card -> chooser map first) and the input views."""
    for table in INTERMEDIATE_TABLES:
        ctx.con.execute(f"drop table if exists {table}")
    drop_input_views(ctx.con)
