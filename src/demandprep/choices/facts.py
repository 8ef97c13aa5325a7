"""Counts the choice build reports in ctx.facts["choices"], and the warnings they call for."""

from __future__ import annotations

from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.context import BuildContext

ADDED_SHARE_WARNING = 0.05  # common practice, no source: a few percent is normal noise
FALLBACK_SHARE_WARNING = 0.2  # common practice, no source


def _one(con: duckdb.DuckDBPyConnection, sql: str) -> Any:
    return con.execute(sql).fetchone()[0]


def choice_facts(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> dict[str, Any]:
    """Counts of visits, occasions, rows, set repairs, multiple purchases and price sources."""
    facts: dict[str, Any] = {
        "occasion_mode": config.choices.occasions,
        "card_visits": _one(con, "select count(*) from choice_visits"),
        "receipts_with_several_cards": _one(
            con, "select count(*) from choice_visits where several_cards"
        ),
        "choosers": _one(con, "select count(*) from choosers"),
        "holdout_choosers": _one(con, "select count(*) from choosers where holdout"),
        "choosers_without_household": _one(
            con, "select count(*) from choosers where not household_known"
        ),
        "occasions": _one(con, "select count(*) from choice_occasions"),
        "outside_occasions": _one(
            con, "select count(*) from choice_occasions where not is_purchase"
        ),
        "burn_in_occasions": _one(
            con,
            "select count(*) from choice_occasions join choice_visit_history using (visit_number) "
            "where burn_in",
        ),
        "rows": _one(con, "select count(*) from choices"),
        # from `choices`, whose kept rows count too (an incremental build makes the sets of
        # the recomputed occasions only): one chosen row per occasion
        "chosen_added_to_set": _one(con, "select count(*) from choices where added_to_set"),
        "sampled_occasions": _one(con, "select count(*) from choices where sampled and chosen"),
        "store_days_with_shelf_set": _one(
            con, "select count(*) from choice_store_days where snapshot_date is not null"
        ),
        "store_days_with_sales_set": _one(
            con, "select count(*) from choice_store_days where snapshot_date is null"
        ),
        "multiple_purchases": multiple_purchase_facts(con, config),
        "outside_universe_purchase_visits": _one(
            con,
            "select count(distinct visit_number) from choice_visit_purchases "
            "where alternative is null",
        ),
        "price_sources": dict(
            con.execute(
                "select price_source, count(*) from choices group by price_source order by 1"
            ).fetchall()
        ),
    }
    return facts


def multiple_purchase_facts(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> dict:
    """Visits that bought several alternatives and what the configured policy did with them."""
    policy = config.choices.multiple_purchases
    visits, products = con.execute(
        "select count(*), coalesce(sum(products), 0) from ("
        "select visit_number, count(*) as products from choice_visit_purchases "
        "where alternative is not null group by visit_number having count(*) > 1)"
    ).fetchone()
    effect = {
        "largest_spend": {"purchases_not_kept": products - visits},
        "split": {"occasions_made": products},
        "drop": {"visits_dropped": visits},
    }[policy]
    return {"policy": policy, "visits": visits, "products_in_those_visits": products, **effect}


def warn_on_facts(ctx: BuildContext, facts: dict[str, Any]) -> None:
    """Warn about what an analyst should know before estimating on `choices`."""
    if not facts["occasions"]:
        ctx.warn(
            "choices: no choice occasions (no receipt with a card id bought the category); "
            "choices and choosers are empty."
        )
    occasions = facts["occasions"] or 1
    added = facts["chosen_added_to_set"]
    if added / occasions > ADDED_SHARE_WARNING:
        ctx.warn(
            f"choices: the chosen alternative had to be added to its own set at {added} of "
            f"{facts['occasions']} occasions; availability data may be incomplete."
        )
    sources = facts["price_sources"]
    priced = sum(n for s, n in sources.items() if s != "outside") or 1
    fallback = sum(n for s, n in sources.items() if s not in ("shelf", "outside"))
    if fallback / priced > FALLBACK_SHARE_WARNING:
        ctx.warn(
            f"choices: {fallback} of {priced} alternative rows are not priced from the "
            "shelf-price file (see price_source)."
        )
    if sources.get("missing"):
        ctx.warn(
            f"choices: {sources['missing']} alternative rows have no price at all "
            "(price_source = 'missing')."
        )
    if facts["receipts_with_several_cards"]:
        ctx.warn(
            f"choices: {facts['receipts_with_several_cards']} receipts carry several card "
            "ids; each was given to the smallest id."
        )
    multiple = facts["multiple_purchases"]
    if multiple["visits"]:
        ctx.warn(
            f"choices: {multiple['visits']} visits bought several category products; "
            f"policy {multiple['policy']!r} applied."
        )
