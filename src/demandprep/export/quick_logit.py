"""A quick plain-logit demand estimate for the report, by OLS and by IV (two-stage least squares).

Berry (1994): with the outside good's share s_0, ln s_j - ln s_0 = x_j b - alpha p_j + xi_j, so
the log share ratio is regressed on price and the product characteristics. The IV estimate
instruments price with `iv_hausman_price` (else every numeric `iv_*` column). Own-price
elasticities of the logit are -alpha p_j (1 - s_j) (Train, Discrete Choice Methods with
Simulation, ch. 3), i.e. the price coefficient times p_j (1 - s_j). Fringe products, zero shares
and non-positive prices are left out. This is a diagnostic, not the study's model.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import duckdb
import numpy as np

from demandprep.config import ProjectConfig
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
RANK_TOLERANCE = 1e-10


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
    wanted = ["log_share_ratio", "price", "share", *characteristics, *instruments]
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
    )
    return _subset(data, keep)


def ols(outcome: np.ndarray, design: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares coefficients and classical standard errors (residual variance / (n - k))."""
    beta, *_ = np.linalg.lstsq(design, outcome, rcond=None)
    residual = outcome - design @ beta
    return beta, _std_errors(residual, design, design)


def two_stage_least_squares(
    outcome: np.ndarray, design: np.ndarray, instruments: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """2SLS coefficients and classical standard errors; `instruments` includes the exogenous."""
    gamma, *_ = np.linalg.lstsq(instruments, design, rcond=None)
    fitted = instruments @ gamma
    beta, *_ = np.linalg.lstsq(fitted, outcome, rcond=None)
    residual = outcome - design @ beta
    return beta, _std_errors(residual, design, fitted)


def partial_f(endogenous: np.ndarray, exog: np.ndarray, excluded: np.ndarray) -> float:
    """First-stage F statistic of the excluded instruments (nested-model F test)."""
    full = np.column_stack([exog, excluded])
    rss_restricted = _rss(endogenous, exog)
    rss_full = _rss(endogenous, full)
    dof = endogenous.size - np.linalg.matrix_rank(full)
    return float(((rss_restricted - rss_full) / excluded.shape[1]) / (rss_full / dof))


def own_price_elasticities(
    price_coefficient: float, price: np.ndarray, share: np.ndarray
) -> np.ndarray:
    """Logit own-price elasticities -alpha p (1 - s), with alpha = -price_coefficient."""
    alpha = -price_coefficient
    return -alpha * price * (1.0 - share)


def _estimate(data: LogitData, assumption: str, method: str) -> LogitEstimate:
    design = np.column_stack([data.price, data.exog])
    names = ["price", *data.exog_names]
    if method == "ols":
        beta, errors = ols(data.outcome, design)
        strength, used = None, []
    else:
        beta, errors = two_stage_least_squares(
            data.outcome, design, np.column_stack([data.instruments, data.exog])
        )
        strength = partial_f(data.price, data.exog, data.instruments)
        used = data.instrument_names
    elasticity = own_price_elasticities(float(beta[0]), data.price, data.share)
    return LogitEstimate(
        assumption=assumption,
        method=method,
        rows=int(data.outcome.size),
        names=names,
        coefficients=[float(v) for v in beta],
        std_errors=[float(v) for v in errors],
        price_coefficient=float(beta[0]),
        price_std_error=float(errors[0]),
        elasticity_median=float(np.median(elasticity)),
        elasticity_p10=float(np.quantile(elasticity, 0.1)),
        elasticity_p90=float(np.quantile(elasticity, 0.9)),
        positive_elasticity_share=float(np.mean(elasticity > 0)),
        instruments=list(used),
        first_stage_f=strength,
    )


def _std_errors(residual: np.ndarray, design: np.ndarray, bread: np.ndarray) -> np.ndarray:
    rows, width = design.shape
    variance = residual @ residual / (rows - width)
    return np.sqrt(np.diag(variance * np.linalg.pinv(bread.T @ bread)))


def _rss(outcome: np.ndarray, design: np.ndarray) -> float:
    beta, *_ = np.linalg.lstsq(design, outcome, rcond=None)
    residual = outcome - design @ beta
    return float(residual @ residual)


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
    kept = [_numeric(first_column)[complete]]
    chosen: list[int] = []
    for index in range(matrix.shape[1]):
        trial = np.column_stack([*kept, matrix[complete, index]])
        if (
            np.linalg.matrix_rank(trial, tol=RANK_TOLERANCE * max(1, trial.shape[0]))
            == trial.shape[1]
        ):
            kept.append(matrix[complete, index])
            chosen.append(index)
    return matrix[:, chosen], [names[i] for i in chosen]


def _subset(data: LogitData, keep: np.ndarray) -> LogitData:
    return LogitData(
        data.outcome[keep],
        data.price[keep],
        data.share[keep],
        data.exog[keep],
        data.exog_names,
        data.instruments[keep],
        data.instrument_names,
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
