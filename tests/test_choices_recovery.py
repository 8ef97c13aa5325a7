"""Recovery: a conditional logit on the exported rows of a demo panel finds the true parameters.

The demo world is generated with household heterogeneity, state dependence, price endogeneity
and demand shocks switched off, so each card visit that buys coffee is a plain logit choice among
the products on the shelf (demandprep.demo.choices); conditional on buying, the outside option
drops out, leaving price and characteristics.
"""

from __future__ import annotations

import json
import tomllib
from importlib import resources

import numpy as np
import polars as pl
import pytest
from choices_fixtures import run_pipeline
from demo_worlds import HOMOGENEOUS_PANEL
from statsmodels.discrete.conditional_models import ConditionalLogit

from demandprep.config import parse_config

REGRESSORS = ("price", "roast_level", "organic", "pack_grams")


@pytest.fixture(scope="module")
def homogeneous_panel(tmp_path_factory, demo_worlds):
    folder = demo_worlds.copy(
        HOMOGENEOUS_PANEL, tmp_path_factory.mktemp("homogeneous_world") / "world"
    )
    raw = tomllib.loads(resources.files("demandprep.templates").joinpath("demo.toml").read_text())
    raw["choices"].update(occasions="category_visits", loyalty_burn_in_days=0)
    config = parse_config(raw, folder / "demandprep.toml")
    ctx, frame = run_pipeline(config)
    truth = json.loads((folder / "truth.json").read_text())["parameters"]
    yield ctx, frame, truth
    ctx.con.close()


def test_conditional_logit_on_exported_rows_recovers_price_and_characteristics(homogeneous_panel):
    _, frame, truth = homogeneous_panel
    frame = frame.sort("occasion", "alternative")
    exog = frame.select(pl.col(c).cast(pl.Float64) for c in REGRESSORS).to_numpy()
    groups = frame["occasion"].rank("dense").to_numpy()
    # reference: statsmodels ConditionalLogit, grouped by occasion
    fit = ConditionalLogit(frame["chosen"].cast(pl.Int64).to_numpy(), exog, groups=groups).fit(
        disp=0
    )
    beta = truth["beta"]
    true_values = np.array(
        [-truth["alpha"], beta["roast_level"], beta["organic"], beta["pack_grams"]]
    )
    assert frame["occasion"].n_unique() > 800
    # within three standard errors of the truth (common practice, no source)
    assert np.all(np.abs(fit.params - true_values) < 3 * fit.bse), (fit.params, fit.bse)
    assert np.all(fit.bse < np.abs(true_values))


def test_demo_panel_rows_are_all_shelf_priced_and_never_repaired(homogeneous_panel):
    ctx, frame, _ = homogeneous_panel
    assert set(frame["price_source"]) == {"shelf"}
    assert ctx.facts["choices"]["chosen_added_to_set"] == 0
