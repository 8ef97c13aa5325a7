"""The invented demo worlds the tests share: one named spec per world kind, and a session cache
that generates each world once (tests/conftest.py hands them out as session fixtures)."""

from __future__ import annotations

import shutil
from dataclasses import replace
from pathlib import Path

from demandprep.demo.spec import DemandParams, WorldSpec
from demandprep.demo.world import generate_world

QUIET = {"fault_rate": 0.0, "return_rate": 0.0, "void_rate": 0.0}

# small generic worlds (tests/test_demo_world.py, tests/test_ingest_sources.py)
SMALL = WorldSpec(seed=3, n_stores=4, weeks=2, visits_per_store_day=40.0, households=300)
FAULTY = replace(SMALL, seed=5, fault_rate=0.05)  # high fault rate: every fault kind occurs
CLEAN = replace(SMALL, seed=9, **QUIET)

# one store-week large enough to compare observed shares with the choice formulas
ONE_STORE_WEEK = WorldSpec(
    seed=21,
    n_stores=1,
    n_regions=1,
    weeks=1,
    visits_per_store_day=6000.0,
    households=20000,
    heterogeneous=False,
    state_dependence=False,
    **QUIET,
)
NESTED_STORE_WEEK = replace(ONE_STORE_WEEK, seed=22, nested=True, nest_sigma=0.6, xi_sd=0.0)

# two stores over eight weeks, nearly every visit with a card, household switches off: the
# baseline that the households' habits are compared with (tests/test_demo_world.py)
PLAIN_HOUSEHOLDS = replace(
    SMALL,
    seed=31,
    n_stores=2,
    n_regions=1,
    weeks=8,
    visits_per_store_day=150.0,
    households=300,
    card_share=0.9,
    heterogeneous=False,
    state_dependence=False,
    **QUIET,
)

# 3 stores x 2 weeks = 6 markets, built through the real ingest (tests/test_shares_demo.py)
SHARES = WorldSpec(
    n_stores=3,
    n_regions=2,
    weeks=2,
    visits_per_store_day=150.0,
    households=300,
    fault_rate=0.0,
    late_opening_share=0.0,
)

# recovery worlds: large store-week markets, switches off so OLS is consistent
# (tests/test_shares_recovery.py)
LOGIT = WorldSpec(
    n_stores=3,
    n_regions=1,
    weeks=6,
    visits_per_store_day=1500.0,
    households=200,
    endogenous=False,
    heterogeneous=False,
    state_dependence=False,
    fault_rate=0.0,
    late_opening_share=0.0,
    max_noncoffee_lines=1,
)
# no demand shock (xi_sd = 0): ln s_j|g would otherwise be correlated with the error; more
# price variation (store noise, promotions) so sigma is identified in few markets
NESTED_LOGIT = replace(
    LOGIT,
    n_stores=2,
    weeks=4,
    visits_per_store_day=8000.0,
    nested=True,
    nest_sigma=0.5,
    xi_sd=0.0,
    return_rate=0.0,
    void_rate=0.0,
    params=DemandParams(nu_sd=0.3, promo_rate=0.3),
)

# a card panel of plain logit choices (tests/test_choices_recovery.py)
HOMOGENEOUS_PANEL = WorldSpec(
    seed=3,
    n_stores=3,
    n_regions=2,
    weeks=6,
    households=500,
    heterogeneous=False,
    state_dependence=False,
    endogenous=False,
    xi_sd=0.0,
    fault_rate=0.0,
)

# endogenous prices, small but with enough visits per store-week (about 40 packs per
# product-market) that shares are well measured; a larger demand shock than the default makes
# the OLS bias clear next to its standard error. Seeds 5, 6 and 7 gave OLS 12-16 standard errors
# off and IV within 1.4 (tests/test_first_stage_demo.py).
ENDOGENOUS_PRICES = WorldSpec(
    seed=5,
    n_stores=6,
    n_regions=2,
    weeks=5,
    visits_per_store_day=1500.0,
    households=200,
    max_noncoffee_lines=1,
    late_opening_share=0.0,
    xi_sd=0.6,
    endogenous=True,
    heterogeneous=False,
    state_dependence=False,
)


class DemoWorlds:
    """Generated worlds by spec, each written once under `root`; hand out copies to change."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self._folders: dict[str, Path] = {}

    def folder(self, spec: WorldSpec) -> Path:
        """The world of `spec`, generated on first use; read it, never write into it."""
        key = repr(spec)
        if key not in self._folders:
            folder = self.root / f"world{len(self._folders)}"
            generate_world(folder, spec)
            self._folders[key] = folder
        return self._folders[key]

    def copy(self, spec: WorldSpec, target: Path) -> Path:
        """A private copy of the world of `spec` at `target` (for tests that write into it)."""
        shutil.copytree(self.folder(spec), target)
        return target
