"""The invented demo world: a grocery chain's packaged-coffee aisle with known true demand.

generate_world (demandprep.demo.world) writes receipts, catalogue, stores, households, shelf
prices, market sizes, cost shifters and truth.json; make_sample writes the small committed sample.
"""

from demandprep.demo.sample import SAMPLE_SPEC, make_sample

__all__ = ["SAMPLE_SPEC", "make_sample"]
