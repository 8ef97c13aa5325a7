"""First-stage strength of the configured instruments, recorded in the build's facts.

Rows: the share_table rows of the first configured market-size assumption that an estimation
would use: inside products (not the fringe) with a price and a log share ratio. Zero shares
depend only on units sold, not on the market size, so these rows are the same for every
assumption; the instruments and prices do not depend on the assumption either. Rows with a null
instrument or characteristic are dropped and counted.
"""

from __future__ import annotations

import numpy as np
import polars as pl

from demandprep.context import BuildContext
from demandprep.instruments.assemble import instrument_column_names
from demandprep.instruments.columns import is_numeric_type, table_columns
from demandprep.instruments.fixed_effects import (
    configured_fixed_effects,
    fixed_effect_codes,
    row_columns,
)
from demandprep.instruments.regression import PartialFTest, partial_f_test

STATISTIC = (
    "homoskedastic partial F of the excluded instruments in the OLS of price on the instruments,"
    " a constant, the numeric product characteristics and the configured fixed effects"
    " (period, product, market or <stores level>:period): "
    "((RSS_r - RSS_u)/q) / (RSS_u/(n - k)); equals linearmodels IV2SLS first_stage "
    "f.stat with cov_type='unadjusted', debiased=True"
)
STATISTIC_ROBUST = (
    "heteroskedasticity-robust partial F: Wald statistic of the excluded instruments with the "
    "White covariance scaled by n/(n - k), divided by q; equals linearmodels IV2SLS first_stage "
    "f.stat with cov_type='robust', debiased=True"
)

ROWS_SQL = """
select
    columns(lambda c: list_contains($keys, c)),
    price::double as price,
    columns(lambda c: list_contains($columns, c))::double,
from share_table
where assumption = $assumption
    and not is_fringe
    and price is not null
    and log_share_ratio is not null
order by market, product
"""


def exogenous_characteristics(ctx: BuildContext) -> list[str]:
    """The product characteristics that enter the first stage: the numeric ones of share_table."""
    columns = table_columns(ctx.con, "share_table")
    return [
        name
        for name in ctx.config.products.characteristics
        if name in columns and is_numeric_type(columns[name])
    ]


def measure_first_stage(ctx: BuildContext) -> None:
    """Compute the partial F, store it in ctx.facts['first_stage'] and warn when it is weak."""
    instruments = instrument_column_names(ctx)
    exogenous = exogenous_characteristics(ctx)
    threshold = ctx.config.instruments.weak_instrument_f
    if not instruments:
        ctx.facts["first_stage"] = _facts(None, [], exogenous, ctx, rows=0, dropped=0)
        ctx.warn("no excluded instruments are configured, so first-stage strength is unknown.")
        return
    frame = _first_stage_rows(ctx, instruments + exogenous)
    complete = frame.drop_nulls(subset=instruments + exogenous)
    dropped = frame.height - complete.height
    keys = {name: complete[name].to_numpy() for name in row_columns(_fixed_effects(ctx))}
    result = partial_f_test(
        complete["price"].to_numpy(),
        complete.select(instruments).to_numpy(),
        complete.select(exogenous).to_numpy() if exogenous else np.zeros((complete.height, 0)),
        fixed_effect_codes(ctx.con, ctx.config, keys),
    )
    facts = _facts(result, instruments, exogenous, ctx, rows=complete.height, dropped=dropped)
    ctx.facts["first_stage"] = facts
    if facts["weak"]:
        shown = "undefined" if result.partial_f is None else f"{result.partial_f:.2f}"
        ctx.warn(
            f"weak instruments: first-stage partial F = {shown} is below "
            f"{threshold:g} (Staiger & Stock 1997 rule of thumb) for {', '.join(instruments)}."
        )


def _first_stage_rows(ctx: BuildContext, columns: list[str]) -> pl.DataFrame:
    assumption = next(iter(ctx.config.market_size))
    params = {
        "columns": columns,
        "assumption": assumption,
        # market is always read so the list is never empty (DuckDB refuses an empty columns())
        "keys": list(dict.fromkeys(["market", *row_columns(_fixed_effects(ctx))])),
    }
    return ctx.con.sql(ROWS_SQL, params=params).pl()


def _fixed_effects(ctx: BuildContext) -> list[str]:
    return configured_fixed_effects(ctx.config)


def _facts(
    result: PartialFTest | None,
    instruments: list[str],
    exogenous: list[str],
    ctx: BuildContext,
    rows: int,
    dropped: int,
) -> dict:
    partial_f = None if result is None else result.partial_f
    return {
        "partial_f": partial_f,
        "partial_f_robust": None if result is None else result.partial_f_robust,
        "df_num": 0 if result is None else result.df_num,
        "df_den": 0 if result is None else result.df_den,
        "p_value": None if result is None else result.p_value,
        "instruments": instruments,
        "weak": partial_f is None or partial_f < ctx.config.instruments.weak_instrument_f,
        "threshold": ctx.config.instruments.weak_instrument_f,
        "coefficients": _coefficients(result, instruments),
        "exogenous": exogenous,
        "fixed_effects": _fixed_effects(ctx),
        "assumption": next(iter(ctx.config.market_size)),
        "rows": rows,
        "rows_dropped_null": dropped,
        "statistic": STATISTIC,
        "statistic_robust": STATISTIC_ROBUST,
    }


def _coefficients(result: PartialFTest | None, instruments: list[str]) -> dict[str, float]:
    # Under collinear instruments these are the minimum-norm least-squares values.
    if result is None:
        return {}
    return dict(zip(instruments, result.coefficients, strict=True))
