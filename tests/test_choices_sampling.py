"""Sampling of alternatives: the chosen one plus K drawn uniformly, fixed by the occasion."""

from __future__ import annotations

from datetime import date, datetime, timedelta

import polars as pl
from choices_fixtures import ChoiceWorld, choices_frame

DAY = date(2024, 1, 15)
BRANDS = "ABCDEF"


def six_product_world(visits: int) -> ChoiceWorld:
    world = ChoiceWorld()
    world.store("S1")
    for n, brand in enumerate(BRANDS):
        world.product(f"{brand.lower()}1", brand, n)
        world.shelf_price("S1", DAY, f"{brand.lower()}1", 1.0 + n)
    for n in range(visits):
        sku = f"{BRANDS[n % 6].lower()}1"
        at = datetime(2024, 1, 15, 8) + timedelta(minutes=n)
        world.visit("S1", at, f"card{n % 50}", [(sku, 1, 2.0)])
    return world


def sampled(world: ChoiceWorld, k: int = 2) -> pl.DataFrame:
    return choices_frame(world.build({"choices": {"sampled_alternatives": k}}))


def test_sampled_sets_hold_the_chosen_plus_k_others():
    frame = sampled(six_product_world(60))
    per_occasion = frame.group_by("occasion").agg(
        rows=pl.len(), chosen=pl.col("chosen").sum(), size=pl.col("choice_set_size").first()
    )
    assert per_occasion["rows"].to_list() == [3] * 60
    assert per_occasion["chosen"].to_list() == [1] * 60
    assert per_occasion["size"].to_list() == [6] * 60
    assert frame["sampled"].all()


def test_sampling_is_identical_on_every_rebuild():
    world = six_product_world(60)
    assert sampled(world).equals(sampled(world))


def test_sets_no_larger_than_k_plus_one_are_not_sampled():
    frame = sampled(six_product_world(12), k=5)
    assert frame.height == 12 * 6
    assert not frame["sampled"].any()


def test_others_are_drawn_uniformly():
    # McFadden (1978): conditional logit on sampled sets stays consistent when every
    # non-chosen alternative is equally likely to be drawn; here P(drawn) = K / 5 = 0.4
    frame = sampled(six_product_world(1200)).filter(~pl.col("chosen"))
    shares = frame.group_by("alternative").len().with_columns(share=pl.col("len") / 1000)
    # each brand is not chosen at 1000 occasions; binomial sd sqrt(0.4 * 0.6 / 1000) = 0.0155,
    # four sd (common practice, no source)
    assert shares.height == 6
    assert (shares["share"] - 0.4).abs().max() < 4 * 0.0155
