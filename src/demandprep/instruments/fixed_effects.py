"""Fixed effects of the first stage and the quick logit, as integer group codes per row.

Names (config `instruments.first_stage_fixed_effects`): `period`, `product`, `market`, and
`<level>:period` for a geography level the stores source maps (`store` or any stores column,
e.g. `region:period`). A level x period effect groups the rows by the level's value of the
market's geography and the period start; the market geography must sit inside one value of the
level (stores, or a geography finer than the level), else the effect is refused.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence

import duckdb
import numpy as np
import pandas as pd

from demandprep.config import ProjectConfig
from demandprep.errors import UserError
from demandprep.instruments.columns import table_columns

KEY = "instruments.first_stage_fixed_effects"
STORE = "store"
ROW_KEYS = {"period": ("period_start",), "product": ("product",), "market": ("market",)}
LEVEL_PERIOD = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*):period$")

# The stores columns a level x period effect reads, one row per store and level (static text;
# the level names arrive as a bound list).
STORE_LEVELS_SQL = """
with

store_levels_wide as (
    select
        cast(store as varchar) as store_key,
        columns(lambda c: list_contains($levels, c))::varchar,
    from stores
),

final as (
    from store_levels_wide
    unpivot include nulls (level_value for level in (columns(* exclude (store_key))))
)

select store_key, level, level_value from final order by store_key, level
"""


def configured_fixed_effects(config: ProjectConfig) -> list[str]:
    """The configured effects in order, each once."""
    return list(dict.fromkeys(config.instruments.first_stage_fixed_effects))


def row_columns(effects: Sequence[str]) -> list[str]:
    """The share_table columns the effects are coded from."""
    needed: list[str] = []
    for name in effects:
        needed += ROW_KEYS.get(name, ("geography", "period_start"))
    return list(dict.fromkeys(needed))


def fixed_effect_codes(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    rows: Mapping[str, np.ndarray],
) -> list[np.ndarray]:
    """One integer code array per configured effect, for the rows given by their key columns."""
    effects = configured_fixed_effects(config)
    levels = [match.group(1) for name in effects if (match := LEVEL_PERIOD.match(name))]
    level_maps = _geography_levels(con, config, levels) if levels else {}
    codes = []
    for name in effects:
        if name in ROW_KEYS:
            codes.append(_codes(*(rows[column] for column in ROW_KEYS[name])))
            continue
        level = LEVEL_PERIOD.match(name).group(1)  # type: ignore[union-attr]
        mapping = level_maps[level]
        values = np.asarray([mapping.get(str(g)) for g in rows["geography"]], dtype=object)
        codes.append(_codes(values, rows["period_start"]))
    return codes


def _geography_levels(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, levels: list[str]
) -> dict[str, dict[str, str | None]]:
    """For each level: market geography -> the level's value, checked to be unique."""
    geography = config.markets.geography
    columns = table_columns(con, "stores")
    for level in levels:
        if level != STORE and level not in columns:
            raise UserError(
                f"config key {KEY!r}: '{level}:period' names {level!r}, which is not a column "
                f"of the stores table (columns: {', '.join(columns)}).",
                "name a geography level mapped in sources.stores.columns, e.g. region:period.",
            )
    read = [name for name in dict.fromkeys([geography, *levels]) if name != STORE]
    per_store: dict[str, dict[str, str | None]] = {}
    if read:
        for store, level, value in con.execute(STORE_LEVELS_SQL, {"levels": read}).fetchall():
            per_store.setdefault(store, {})[level] = value
    else:
        stores = con.execute("select store::varchar from stores").fetchall()
        per_store = {store: {} for (store,) in stores}
    return {level: _level_of_geography(per_store, geography, level) for level in levels}


def _level_of_geography(
    per_store: dict[str, dict[str, str | None]], geography: str, level: str
) -> dict[str, str | None]:
    found: dict[str, set[str | None]] = {}
    for store, values in per_store.items():
        key = store if geography == STORE else values.get(geography)
        found.setdefault(str(key), set()).add(store if level == STORE else values.get(level))
    spanning = sorted(key for key, values in found.items() if len(values) > 1)
    if spanning:
        raise UserError(
            f"config key {KEY!r}: geography {spanning[0]!r} spans several {level!r} values, so "
            f"'{level}:period' is not defined for its markets.",
            f"use a level at or above markets.geography ({geography}), or market effects.",
        )
    return {key: next(iter(values)) for key, values in found.items()}


def _codes(*columns: np.ndarray) -> np.ndarray:
    """Dense integer codes of the tuples of the given columns (nulls form their own group)."""
    codes = _dense(_column_codes(columns[0]))
    for column in columns[1:]:
        # one integer per pair of codes, made dense again, so it stays below rows squared
        more = _dense(_column_codes(column))
        codes = _dense(codes * (int(more.max(initial=0)) + 1) + more)
    return codes


def _dense(codes: np.ndarray) -> np.ndarray:
    dense, _ = pd.factorize(codes)
    return dense.astype(np.int64)


def _column_codes(values: np.ndarray) -> np.ndarray:
    # codes of one column by hashing (a Python join per row cost 0.36 s a night at 128,000
    # rows, a sort of the texts 0.15 s); a null is a group of its own (0), apart from any text
    codes, _ = pd.factorize(np.ma.getdata(values), use_na_sentinel=True)
    if np.ma.isMaskedArray(values):
        codes = np.where(np.ma.getmaskarray(values), -1, codes)
    return codes.astype(np.int64) + 1
