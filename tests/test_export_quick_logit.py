"""The report's quick logit: OLS and IV estimates, first-stage F and implied elasticities."""

from __future__ import annotations

import threading
from pathlib import Path

import duckdb
import numpy as np
import pytest
import statsmodels.formula.api as smf
from export_fixtures import ALPHA, export_config, fill_warehouse
from linearmodels.iv import IV2SLS

from demandprep.export.quick_logit import (
    load_logit_data,
    own_price_elasticities,
    quick_logit,
)

SAMPLE_SQL = """
select log_share_ratio, price, share, roast_level, organic::int as organic, pack_grams,
       iv_hausman_price
from share_table
where assumption = 'visits' and not is_fringe and share > 0
order by market, product
"""


@pytest.fixture(scope="module")
def warehouse(tmp_path_factory):
    base = tmp_path_factory.mktemp("quick-logit")
    con = duckdb.connect()
    fill_warehouse(con, occasions=5)
    yield con, export_config(base)
    con.close()


def test_ols_matches_statsmodels(warehouse) -> None:
    con, config = warehouse
    [ols, _] = quick_logit(con, config, "visits")
    frame = con.sql(SAMPLE_SQL).df()
    # reference: statsmodels OLS with its own design from the formula
    reference = smf.ols(
        "log_share_ratio ~ price + C(roast_level) + organic + pack_grams", frame
    ).fit()
    assert ols.rows == reference.nobs == 144
    assert ols.price_coefficient == pytest.approx(reference.params["price"], rel=1e-9)
    assert ols.price_std_error == pytest.approx(reference.bse["price"], rel=1e-9)


def test_iv_and_first_stage_match_linearmodels(warehouse) -> None:
    con, config = warehouse
    [_, iv] = quick_logit(con, config, "visits")
    frame = con.sql(SAMPLE_SQL).df()
    # reference: linearmodels IV2SLS, homoskedastic covariance with the n - k correction
    reference = IV2SLS.from_formula(
        "log_share_ratio ~ 1 + C(roast_level) + organic + pack_grams + [price ~ iv_hausman_price]",
        frame,
    ).fit(cov_type="unadjusted", debiased=True)
    assert iv.instruments == ["iv_hausman_price"]
    assert iv.price_coefficient == pytest.approx(reference.params["price"], rel=1e-9)
    assert iv.price_std_error == pytest.approx(reference.std_errors["price"], rel=1e-9)
    first_stage = reference.first_stage.diagnostics.loc["price", "f.stat"]
    assert iv.first_stage_f == pytest.approx(first_stage, rel=1e-9)


def test_iv_undoes_the_price_endogeneity_of_the_fixture(warehouse) -> None:
    con, config = warehouse
    ols, iv = quick_logit(con, config, "visits")
    # The fixture's prices rise with the unobserved quality, which biases OLS toward zero.
    assert -ols.price_coefficient < ALPHA
    assert abs(-iv.price_coefficient - ALPHA) < 3 * iv.price_std_error
    assert abs(-iv.price_coefficient - ALPHA) < abs(-ols.price_coefficient - ALPHA)


def test_elasticities_match_the_logit_formula_and_a_finite_difference() -> None:
    alpha, delta0 = 2.0, np.array([1.0, 0.5, -0.2])
    price = np.array([1.2, 0.8, 1.5])

    def shares(p: np.ndarray) -> np.ndarray:
        utility = np.exp(delta0 - alpha * p)
        return utility / (1.0 + utility.sum())

    share = shares(price)
    formula = own_price_elasticities(-alpha, price, share)
    # Train, Discrete Choice Methods with Simulation, ch. 3: own elasticity = -alpha p (1 - s)
    assert formula == pytest.approx(-alpha * price * (1 - share), rel=1e-12)
    step = 1e-6
    numeric = []
    for j in range(3):
        bumped = price.copy()
        bumped[j] += step
        numeric.append((shares(bumped)[j] - share[j]) / step * price[j] / share[j])
    assert formula == pytest.approx(np.array(numeric), rel=1e-4)


def test_fringe_and_rows_without_instrument_are_left_out(warehouse) -> None:
    con, config = warehouse
    data = load_logit_data(con, config, "peak")
    assert data.outcome.size == 144  # 24 markets x 6 products, fringe excluded
    assert data.exog_names == [
        "constant",
        "roast_level=light",
        "roast_level=medium",
        "organic",
        "pack_grams",
    ]


def test_too_few_rows_give_no_estimate(tmp_path: Path) -> None:
    con = duckdb.connect()
    fill_warehouse(con, occasions=5)
    con.execute("delete from share_table where market <> 'S01/2024-03-04'")
    assert quick_logit(con, export_config(tmp_path), "visits") == []


def test_a_build_without_market_tables_has_no_quick_logit(tmp_path: Path) -> None:
    from demandprep.context import BuildContext
    from demandprep.export.logit_alongside import estimates_alongside

    con = duckdb.connect()
    ctx = BuildContext(con=con, config=export_config(tmp_path))
    with estimates_alongside(ctx) as estimates:
        pass
    assert estimates.result() == [] and ctx.warnings == []


def test_the_export_estimates_on_a_thread_of_its_own_while_it_writes(warehouse, monkeypatch):
    # the data files are written meanwhile; the estimates must equal the plain call's
    from demandprep.context import BuildContext
    from demandprep.export import logit_alongside as build

    con, config = warehouse
    threads: list[str] = []

    def recorded(*args, **kwargs):
        threads.append(threading.current_thread().name)
        return quick_logit(*args, **kwargs)

    monkeypatch.setattr(build, "quick_logit", recorded)
    with build.estimates_alongside(BuildContext(con=con, config=config)) as estimates:
        caller = threading.current_thread().name
    assert estimates.result() == every_estimate(con, config)
    assert len(estimates.result()) == 4  # OLS and IV for each of the two assumptions
    assert threads and caller not in threads


def test_a_failing_estimate_reaches_the_export(warehouse, monkeypatch):
    from demandprep.context import BuildContext
    from demandprep.errors import UserError
    from demandprep.export import logit_alongside as build

    con, config = warehouse

    def failing(*_args, **_kwargs):
        raise UserError("geography spans two regions", "use market effects")

    monkeypatch.setattr(build, "quick_logit", failing)
    with build.estimates_alongside(BuildContext(con=con, config=config)) as estimates:
        pass
    with pytest.raises(UserError, match="spans two regions"):
        estimates.result()


def test_inside_an_open_transaction_the_estimates_see_its_tables(tmp_path: Path) -> None:
    # another cursor would read the last committed share table, not this transaction's
    from demandprep.context import BuildContext
    from demandprep.export import logit_alongside as build

    con = duckdb.connect()
    ctx = BuildContext(con=con, config=export_config(tmp_path))
    with ctx.atomic():
        fill_warehouse(con, occasions=5)
        with build.estimates_alongside(ctx) as estimates:
            pass
        assert estimates.result() == every_estimate(con, ctx.config)
        assert estimates.result()


def every_estimate(con: duckdb.DuckDBPyConnection, config) -> list:
    """The plain calls, one assumption after the other on the caller's connection."""
    return [e for name in config.market_size for e in quick_logit(con, config, name)]
