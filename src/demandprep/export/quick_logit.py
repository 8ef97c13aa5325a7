"""A quick plain-logit demand estimate for the report, by OLS and by IV (two-stage least squares).

Berry (1994): with the outside good's share s_0, ln s_j - ln s_0 = x_j b - alpha p_j + xi_j, so
the log share ratio is regressed on price, the product characteristics and the configured fixed
effects (`instruments.first_stage_fixed_effects`: the effect with most levels is absorbed by
demeaning within its groups, any other enters as dummy columns; characteristics constant within
an effect drop out). The IV estimate instruments price with `iv_hausman_price` (else every
numeric `iv_*` column) and reports its own first stage, classic and heteroskedasticity-robust F,
on the same rows, regressors and effects. Own-price
elasticities of the logit are -alpha p_j (1 - s_j) (Train, Discrete Choice Methods with
Simulation, ch. 3), i.e. the price coefficient times p_j (1 - s_j). Fringe products, zero shares
and non-positive prices are left out. This is a diagnostic, not the study's model.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import duckdb
import numpy as np

from demandprep.config import ProjectConfig
from demandprep.instruments.fixed_effects import (
    configured_fixed_effects,
    fixed_effect_codes,
    row_columns,
)
from demandprep.instruments.regression import (
    absorbed_and_dummies,
    demean_within,
    partial_f_test,
)
from demandprep.sqlfiles import quote_identifier

SHARE_TABLE = "share_table"
HAUSMAN = "iv_hausman_price"
NUMERIC_TYPES = (
    "DOUBLE",
    "FLOAT",
    "BIGINT",
    "INTEGER",
    "SMALLINT",
    "TINYINT",
    "HUGEINT",
    "UBIGINT",
    "UINTEGER",
    "USMALLINT",
    "UTINYINT",
    "BOOLEAN",
)
INDEPENDENCE_TOLERANCE = 1e-9  # share of a column's norm left outside the span


@dataclass
class LogitData:
    """The regression sample of one assumption: outcome, price, share and the exogenous design."""

    outcome: np.ndarray
    price: np.ndarray
    share: np.ndarray
    exog: np.ndarray
    exog_names: list[str]
    instruments: np.ndarray
    instrument_names: list[str]
    effect_codes: list[np.ndarray] = field(default_factory=list)
    effect_names: list[str] = field(default_factory=list)


@dataclass
class LogitEstimate:
    """One estimate: coefficients, standard errors and the implied own-price elasticities."""

    assumption: str
    method: str
    rows: int
    names: list[str]
    coefficients: list[float]
    std_errors: list[float]
    price_coefficient: float
    price_std_error: float
    elasticity_median: float
    elasticity_p10: float
    elasticity_p90: float
    positive_elasticity_share: float
    instruments: list[str] = field(default_factory=list)
    first_stage_f: float | None = None
    first_stage_f_robust: float | None = None
    fixed_effects: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        """JSON-ready form for the manifest."""
        return asdict(self)


def quick_logit(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, assumption: str
) -> list[LogitEstimate]:
    """OLS and (when instruments exist) IV logit estimates for one market-size assumption."""
    data = load_logit_data(con, config, assumption)
    if data.outcome.size <= data.exog.shape[1] + 1:
        return []
    estimates = [_estimate(data, assumption, "ols")]
    usable = ~np.isnan(data.instruments).any(axis=1) if data.instrument_names else None
    if usable is not None and usable.sum() > data.exog.shape[1] + len(data.instrument_names):
        estimates.append(_estimate(_subset(data, usable), assumption, "iv"))
    return estimates


def load_logit_data(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, assumption: str
) -> LogitData:
    """Read one assumption's estimation sample from `share_table` into numpy arrays."""
    types = _column_types(con)
    characteristics = [c for c in config.products.characteristics if c in types]
    instruments = _instrument_columns(types)
    effects = configured_fixed_effects(config)
    keys = row_columns(effects)
    wanted = list(
        dict.fromkeys(["log_share_ratio", "price", "share", *characteristics, *instruments, *keys])
    )
    sql = (
        f"select {', '.join(quote_identifier(c) for c in wanted)} from {SHARE_TABLE} "  # noqa: S608
        f"where {' and '.join(_sample_filters(types))} order by market, product"
    )
    columns = con.sql(sql, params={"assumption": assumption}).fetchnumpy()
    exog, exog_names = _design(columns, characteristics, types)
    outcome = _numeric(columns["log_share_ratio"])
    instrument_matrix = np.column_stack(
        [_numeric(columns[name]) for name in instruments] or [np.empty((outcome.size, 0))]
    )
    keep = ~np.isnan(exog).any(axis=1) & ~np.isnan(outcome)
    data = LogitData(
        outcome,
        _numeric(columns["price"]),
        _numeric(columns["share"]),
        exog,
        exog_names,
        instrument_matrix.reshape(outcome.size, len(instruments)),
        instruments,
        fixed_effect_codes(con, config, {key: columns[key] for key in keys}),
        effects,
    )
    return _subset(data, keep)


def ols(
    outcome: np.ndarray, design: np.ndarray, absorbed: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares coefficients and classical standard errors (residual variance / (n - k));
    `absorbed` counts the levels of an effect demeaned away beforehand (they enter k)."""
    beta, *_ = np.linalg.lstsq(design, outcome, rcond=None)
    residual = outcome - design @ beta
    return beta, _std_errors(residual, design, design, absorbed)


def two_stage_least_squares(
    outcome: np.ndarray, design: np.ndarray, instruments: np.ndarray, absorbed: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """2SLS coefficients and classical standard errors; `instruments` includes the exogenous."""
    gamma, *_ = np.linalg.lstsq(instruments, design, rcond=None)
    fitted = instruments @ gamma
    beta, *_ = np.linalg.lstsq(fitted, outcome, rcond=None)
    residual = outcome - design @ beta
    return beta, _std_errors(residual, design, fitted, absorbed)


def own_price_elasticities(
    price_coefficient: float, price: np.ndarray, share: np.ndarray
) -> np.ndarray:
    """Logit own-price elasticities -alpha p (1 - s), with alpha = -price_coefficient."""
    alpha = -price_coefficient
    return -alpha * price * (1.0 - share)


@dataclass
class Design:
    """One estimate's matrices after the effects: price first, then the named regressors, then
    the dummies of the effects not absorbed; `absorbed` levels were demeaned away."""

    outcome: np.ndarray
    regressors: np.ndarray
    instruments: np.ndarray
    names: list[str]
    absorbed: int


def _estimate(data: LogitData, assumption: str, method: str) -> LogitEstimate:
    design = effects_design(data)
    first_stage = None
    if method == "ols":
        beta, errors = ols(design.outcome, design.regressors, design.absorbed)
    else:
        exogenous = np.column_stack([design.instruments, design.regressors[:, 1:]])
        beta, errors = two_stage_least_squares(
            design.outcome, design.regressors, exogenous, design.absorbed
        )
        characteristics = [i for i, name in enumerate(data.exog_names) if name != "constant"]
        first_stage = partial_f_test(
            data.price, data.instruments, data.exog[:, characteristics], data.effect_codes
        )
    width = len(design.names)
    elasticity = own_price_elasticities(float(beta[0]), data.price, data.share)
    return LogitEstimate(
        assumption=assumption,
        method=method,
        rows=int(data.outcome.size),
        names=design.names,
        coefficients=[float(v) for v in beta[:width]],
        std_errors=[float(v) for v in errors[:width]],
        price_coefficient=float(beta[0]),
        price_std_error=float(errors[0]),
        elasticity_median=float(np.median(elasticity)),
        elasticity_p10=float(np.quantile(elasticity, 0.1)),
        elasticity_p90=float(np.quantile(elasticity, 0.9)),
        positive_elasticity_share=float(np.mean(elasticity > 0)),
        instruments=list(data.instrument_names) if first_stage else [],
        first_stage_f=None if first_stage is None else first_stage.partial_f,
        first_stage_f_robust=None if first_stage is None else first_stage.partial_f_robust,
        fixed_effects=list(data.effect_names),
    )


def effects_design(data: LogitData) -> Design:
    """Absorb the effect with most levels, add the others as dummies, drop collinear columns."""
    effect, extra = absorbed_and_dummies(data.effect_codes, data.outcome.size)
    arrays = (data.outcome, data.price, data.exog, extra, data.instruments)
    absorbed = 0
    if effect is not None:
        arrays = tuple(demean_within(a, effect) for a in arrays)
        absorbed = effect.levels
    outcome, price, exog, extra, instruments = arrays
    # Order of preference: the constant, then the effects, then the characteristics, so a
    # characteristic constant within an effect is the column that drops out.
    candidates = np.column_stack([exog[:, :1], extra, exog[:, 1:]])
    kept = _independent_columns(price, candidates)
    width = extra.shape[1]
    named = [i for i in kept if i == 0 or i > width]
    effect_columns = [i for i in kept if 0 < i <= width]
    names = ["price"] + [data.exog_names[0 if i == 0 else i - width] for i in named]
    regressors = np.column_stack([price, candidates[:, named], candidates[:, effect_columns]])
    return Design(outcome, regressors, instruments, names, absorbed)


def _std_errors(
    residual: np.ndarray, design: np.ndarray, bread: np.ndarray, absorbed: int = 0
) -> np.ndarray:
    rows, width = design.shape
    variance = residual @ residual / (rows - width - absorbed)
    return np.sqrt(np.diag(variance * np.linalg.pinv(bread.T @ bread)))


def _design(
    columns: dict[str, np.ndarray], characteristics: list[str], types: dict[str, str]
) -> tuple[np.ndarray, list[str]]:
    """Constant plus characteristics (text ones as 0/1 dummies), without collinear columns."""
    rows = len(columns["price"])
    parts: list[np.ndarray] = [np.ones(rows)]
    names = ["constant"]
    for name in characteristics:
        if types[name] in NUMERIC_TYPES:
            parts.append(_numeric(columns[name]))
            names.append(name)
            continue
        values = np.asarray([str(v) for v in _filled(columns[name])], dtype=object)
        for level in sorted(set(values))[1:]:
            parts.append((values == level).astype(float))
            names.append(f"{name}={level}")
    return _independent(np.column_stack(parts), names, first_column=columns["price"])


def _independent(
    matrix: np.ndarray, names: list[str], first_column: np.ndarray
) -> tuple[np.ndarray, list[str]]:
    """Drop columns that are linear combinations of price and the columns kept before them."""
    complete = ~np.isnan(matrix).any(axis=1) & ~np.isnan(_numeric(first_column))
    chosen = _independent_columns(_numeric(first_column)[complete], matrix[complete])
    return matrix[:, chosen], [names[i] for i in chosen]


def _independent_columns(first: np.ndarray, matrix: np.ndarray) -> list[int]:
    """Indices of the columns of `matrix` outside the span of `first` and the columns kept
    before them (Gram-Schmidt, twice, in order)."""
    basis = np.zeros((matrix.shape[0], matrix.shape[1] + 1))
    size = 0
    chosen: list[int] = []
    for index, column in enumerate([first, *matrix.T]):
        norm = float(np.linalg.norm(column))
        if norm == 0:
            continue
        rest = column - basis[:, :size] @ (basis[:, :size].T @ column)
        rest -= basis[:, :size] @ (basis[:, :size].T @ rest)
        remaining = float(np.linalg.norm(rest))
        if remaining > INDEPENDENCE_TOLERANCE * norm:
            basis[:, size] = rest / remaining
            size += 1
            if index > 0:
                chosen.append(index - 1)
    return chosen


def _subset(data: LogitData, keep: np.ndarray) -> LogitData:
    return LogitData(
        data.outcome[keep],
        data.price[keep],
        data.share[keep],
        data.exog[keep],
        data.exog_names,
        data.instruments[keep],
        data.instrument_names,
        [codes[keep] for codes in data.effect_codes],
        data.effect_names,
    )


def _column_types(con: duckdb.DuckDBPyConnection) -> dict[str, str]:
    rows = con.execute(
        "select column_name, data_type from duckdb_columns() where table_name = $table "
        "and schema_name = current_schema()",
        {"table": SHARE_TABLE},
    ).fetchall()
    return dict(rows)


def _instrument_columns(types: dict[str, str]) -> list[str]:
    if HAUSMAN in types:
        return [HAUSMAN]
    return sorted(
        name
        for name, kind in types.items()
        if name.startswith("iv_") and kind in NUMERIC_TYPES and kind != "BOOLEAN"
    )


def _sample_filters(types: dict[str, str]) -> list[str]:
    filters = [
        "assumption = $assumption",
        "share > 0",
        "price > 0",
        "isfinite(log_share_ratio)",
    ]
    if "is_fringe" in types:
        filters.append("not coalesce(is_fringe, false)")
    return filters


def _numeric(values: np.ndarray) -> np.ndarray:
    if np.ma.isMaskedArray(values):
        return np.ma.filled(values.astype(float), np.nan)
    return np.asarray(values, dtype=float)


def _filled(values: np.ndarray) -> np.ndarray:
    if np.ma.isMaskedArray(values):
        return np.ma.filled(values.astype(object), "(missing)")
    return np.asarray(values, dtype=object)
