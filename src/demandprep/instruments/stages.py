"""Build stages of the instruments step, in order."""

from demandprep.instruments.assemble import assemble_instruments, build_share_table
from demandprep.instruments.characteristics import build_characteristic_sums, build_differentiation
from demandprep.instruments.cost_shifters import build_cost_shifters
from demandprep.instruments.first_stage import measure_first_stage
from demandprep.instruments.hausman import build_hausman_prices
from demandprep.instruments.inputs import prepare_instrument_inputs
from demandprep.stage import Stage

INSTRUMENT_STAGES: tuple[Stage, ...] = (
    Stage("instrument_inputs", prepare_instrument_inputs),
    Stage("instrument_hausman", build_hausman_prices),
    Stage("instrument_characteristic_sums", build_characteristic_sums),
    Stage("instrument_differentiation", build_differentiation),
    Stage("instrument_cost_shifters", build_cost_shifters),
    Stage("instruments", assemble_instruments),
    Stage("share_table", build_share_table),
    Stage("first_stage", measure_first_stage),
)
