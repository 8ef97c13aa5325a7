"""Demographic draws per market, for random-coefficient (mixed logit) estimation on market data.

Per market, demographic_draws.draws households are drawn with replacement, each with
probability proportional to its visits to the market's stores in the market's period, and
their choices.demographics columns are written (sql/demographics/010_demographic_draws.sql). A
market with fewer than min_households such households draws from its geography over all
periods, then from every household with a visit. The draws are keyed by md5(seed, market,
draw), so a rebuild draws the same whatever the thread count. No household id is exported.
Limits: loyalty-card holders are not all shoppers (cash and card-less visits are not in the
pool), and a household's visits weigh it whatever it bought.
"""

from __future__ import annotations

from demandprep.context import BuildContext
from demandprep.errors import UserError
from demandprep.market.settings import table_columns
from demandprep.schemas.demographics import DemographicDraws
from demandprep.sqlfiles import run_sql
from demandprep.stage import Stage
from demandprep.validate import validate_table

SQL_FILE = "demographics/010_demographic_draws.sql"


def draw_params(ctx: BuildContext) -> dict[str, object]:
    """The bound parameters of the draw SQL, after checking the demographic columns exist."""
    config = ctx.config
    households = table_columns(ctx.con, "households")
    missing = [c for c in config.choices.demographics if c not in households]
    if missing:
        raise UserError(
            f"config key 'choices.demographics' names {missing[0]!r}, which the households "
            f"table does not have (it has {', '.join(households) or 'no table'}).",
            "map it under [sources.households.columns] and ingest again.",
        )
    draws = config.demographic_draws
    return {
        "demographic_columns": ["card", *config.choices.demographics],
        "draws": draws.draws,
        "seed": draws.seed,
        "min_households": draws.min_households,
        "receipt_ids_unique_per": config.markets.receipt_ids_unique_per,
    }


def build_demographic_draws(ctx: BuildContext) -> None:
    """Draw every market's households, validate, and note where the draws came from."""
    run_sql(ctx.con, SQL_FILE, draw_params(ctx))
    validate_table(ctx.con, "demographic_draws", DemographicDraws)
    levels = dict(
        ctx.con.execute(
            "select draw_level, count(distinct market) from demographic_draws group by all "
            "order by all"
        ).fetchall()
    )
    ctx.facts["demographic_draws"] = {"markets_by_level": levels}
    fallback = {level: n for level, n in levels.items() if level != "market"}
    if fallback:
        shown = ", ".join(f"{n} from {level}" for level, n in fallback.items())
        least = ctx.config.demographic_draws.min_households
        ctx.warn(
            f"demographic draws: markets with fewer than {least} households drew from a wider "
            f"pool ({shown})"
        )
    missing = ctx.con.execute(
        "select count(*) from (select distinct market from markets) "
        "where market not in (select market from demographic_draws)"
    ).fetchone()[0]
    if missing:
        ctx.warn(f"demographic draws: {missing} markets have no draws (no household with a visit)")


DEMOGRAPHIC_STAGES: tuple[Stage, ...] = (Stage("demographic_draws", build_demographic_draws),)
