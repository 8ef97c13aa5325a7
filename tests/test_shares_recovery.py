"""Recovery: the share table of a generated demo world gives back the world's true demand
parameters by OLS of the logit inversion (Berry 1994), checked with statsmodels.

Worlds are small but their store-week markets are large (thousands of visits), switches off
(no price endogeneity, no taste heterogeneity, no state dependence) so OLS is consistent, with
one pack per buying visit: with item units and a visits market size of one unit per visit the
shares are choice frequencies. The CSVs are loaded with plain read_csv (market_fixtures) to keep
the test fast; tests/test_shares_demo.py runs the real ingest.
"""

from __future__ import annotations

import json

import duckdb
import numpy as np
import statsmodels.api as sm
from market_fixtures import DEMO_PRODUCTS, demo_config, load_demo_csvs

from demandprep.context import BuildContext
from demandprep.market.stages import run_market_stages

STANDARD_ERRORS = 3.0


def demo_shares(world_dir):
    """Build the share table of a generated world (visits x 1 unit, item units, no universe cut)."""
    config = demo_config(
        world_dir,
        market_size={"visits": {"method": "visits", "units_per_visit": 1.0}},
        products=DEMO_PRODUCTS,
    )
    con = duckdb.connect()
    load_demo_csvs(con, world_dir)
    ctx = BuildContext(con=con, config=config)
    run_market_stages(ctx)
    frame = con.execute("select * from shares where not is_fringe order by market, product").df()
    return frame, json.loads((world_dir / "truth.json").read_text())


def regressors(frame, nested: bool):
    """Constant, price, characteristics, format dummies (beans the base) and ln s_j|g if nested."""
    columns = frame[["price", "roast_level", "organic", "pack_grams"]].astype(float)
    for fmt in ("ground", "capsules"):
        columns[f"format_{fmt}"] = (frame["nest"] == fmt).astype(float)
    if nested:
        columns["log_within_nest_share"] = frame["log_within_nest_share"].astype(float)
    return sm.add_constant(columns)


def true_coefficients(truth, nested: bool):
    """The truth's utility coefficients, named like the regressors (price enters as -alpha)."""
    p = truth["parameters"]
    formats = p["format_effects"]
    coefficients = {
        "const": p["intercept"] + formats["beans"],
        "price": -p["alpha"],
        "roast_level": p["beta"]["roast_level"],
        "organic": p["beta"]["organic"],
        "pack_grams": p["beta"]["pack_grams"],
        "format_ground": formats["ground"] - formats["beans"],
        "format_capsules": formats["capsules"] - formats["beans"],
    }
    if nested:
        coefficients["log_within_nest_share"] = p["nest_sigma"]
    return coefficients


def assert_recovered(fit, truth_coefficients):
    for name, true_value in truth_coefficients.items():
        estimate, error = fit.params[name], fit.bse[name]
        assert abs(estimate - true_value) <= STANDARD_ERRORS * error, (
            f"{name}: estimate {estimate:.5f}, truth {true_value:.5f}, se {error:.5f}"
        )


def test_logit_ols_recovers_alpha_and_beta(logit_world):
    frame, truth = demo_shares(logit_world)
    assert truth["switches"]["endogenous"] is False
    assert len(frame) > 150
    # Berry (1994): ln s_j - ln s_0 = x_j beta - alpha p_j + xi_j; reference: statsmodels OLS
    fit = sm.OLS(frame["log_share_ratio"], regressors(frame, nested=False)).fit()
    assert_recovered(fit, true_coefficients(truth, nested=False))


def test_nested_logit_ols_recovers_sigma(nested_logit_world):
    frame, truth = demo_shares(nested_logit_world)
    assert truth["parameters"]["nest_sigma"] == 0.5
    assert np.all(frame["within_nest_share"] > 0)
    # Berry (1994): ln s_j - ln s_0 = x_j beta - alpha p_j + sigma ln s_j|g + xi_j;
    # reference: statsmodels OLS
    fit = sm.OLS(frame["log_share_ratio"], regressors(frame, nested=True)).fit()
    assert_recovered(fit, true_coefficients(truth, nested=True))
    # without the within-nest term the price coefficient is off: the nested model matters
    plain = sm.OLS(frame["log_share_ratio"], regressors(frame, nested=False)).fit()
    assert (
        abs(plain.params["price"] + truth["parameters"]["alpha"])
        > STANDARD_ERRORS * plain.bse["price"]
    )
