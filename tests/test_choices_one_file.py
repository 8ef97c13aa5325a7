"""One SQL file per step: no folder of sql/ holds two files of one step number, and the choice
build runs the same files whatever optional input (households, shelf prices and their promo
column, store regions, market build) a config has."""

from __future__ import annotations

from collections import Counter
from datetime import date, datetime
from importlib import resources

import pytest
from choices_fixtures import ChoiceWorld

import demandprep.choices.build as choice_build
from demandprep.sqlfiles import run_sql

MONDAY = date(2024, 1, 15)


def test_no_step_number_has_two_files_in_any_sql_folder():
    root = resources.files("demandprep.sql")
    repeated = {}
    for folder in root.iterdir():
        if folder.is_dir():
            numbers = Counter(
                f.name.split("_")[0] for f in folder.iterdir() if f.name.endswith(".sql")
            )
            repeated.update({f"{folder.name}/{n}": k for n, k in numbers.items() if k > 1})
    assert repeated == {}


class _World(ChoiceWorld):
    """A world whose shelf file may lack the promo column and whose stores may lack regions."""

    promo: bool = True
    region: bool = True

    def write(self, con) -> None:
        super().write(con)
        if not self.promo and self.shelf is not None:
            con.execute("alter table shelf_prices drop column promo")
        if not self.region:
            con.execute("alter table stores drop column region")


def _world(households: bool, shelf: bool, promo: bool, region: bool, universe: bool) -> _World:
    world = _World(households=[] if households else None, shelf=[] if shelf else None)
    world.promo, world.region = promo, region
    world.product("a1", "A", 1)
    world.product("b1", "B", 2)
    world.store("S1")
    if shelf:
        world.shelf_price("S1", MONDAY, "a1", 2.0, promo=True)
    if households:
        world.household("card1")
    if universe:
        world.universe = [{"product": "A", "kept": True}, {"product": "B", "kept": True}]
    world.visit("S1", datetime(2024, 1, 15, 10), "card1", [("a1", 1, 2.0)])
    return world


def _files_run(world: ChoiceWorld, monkeypatch) -> list[str]:
    names: list[str] = []

    def recording_run_sql(con, name, params=None):
        names.append(name)
        return run_sql(con, name, params)

    monkeypatch.setattr(choice_build, "run_sql", recording_run_sql)
    world.build()
    return names


@pytest.mark.parametrize(
    ("households", "shelf", "promo", "region", "universe"),
    [
        (False, False, False, False, False),
        (True, True, False, True, False),
        (False, True, True, False, True),
    ],
)
def test_every_config_runs_the_same_step_files(
    monkeypatch, households, shelf, promo, region, universe
):
    full = _files_run(_world(True, True, True, True, True), monkeypatch)
    other = _files_run(_world(households, shelf, promo, region, universe), monkeypatch)
    assert other == full
