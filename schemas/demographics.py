"""pandera model of the demographic draws per market (polars backend).

The drawn demographic columns are named by choices.demographics, so the model is not strict;
the data dictionary documents them from the config.
"""

from __future__ import annotations

import pandera.polars as pa

DRAW_LEVELS = ("market", "geography", "all")


class DemographicDraws(pa.DataFrameModel):
    """One row per assumption, market and draw: one household's demographics."""

    assumption: str = pa.Field(
        description="Name of the market-size assumption ([market_size.<name>]); the draws are "
        "the same under every assumption.",
        metadata={"unit": "name"},
    )
    market: str = pa.Field(
        description="Market id of the share table: geography, '/', period start as YYYY-MM-DD.",
        metadata={"unit": "id"},
    )
    draw: int = pa.Field(
        ge=1,
        description="Draw number within the market, 1 to demographic_draws.draws.",
        metadata={"unit": "index"},
    )
    weight: float = pa.Field(
        gt=0,
        le=1,
        description="Integration weight of the draw (equal weights summing to one per market).",
        metadata={"unit": "weight", "formula": "1 / demographic_draws.draws"},
    )
    draw_level: str = pa.Field(
        isin=DRAW_LEVELS,
        description="Which households the market's draws come from: market (those that "
        "visited its stores in its period), geography (its geography over all periods, when "
        "the market had fewer than demographic_draws.min_households) or all (every household "
        "with a visit, when the geography had fewer too).",
        metadata={
            "unit": "category",
            "formula": "household h drawn with probability visits_h / sum of visits in the pool",
        },
    )

    class Config:
        strict = False  # the demographic columns vary with the config
        unique = ["assumption", "market", "draw"]
