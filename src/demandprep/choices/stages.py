"""Build stages of the chooser-alternative build, in order."""

from demandprep.choices.build import (
    build_choice_history,
    build_choice_occasions,
    build_choice_sets,
    build_choices,
    build_choosers,
    drop_choice_tables,
    prepare_choice_inputs,
)
from demandprep.stage import Stage

CHOICE_STAGES: tuple[Stage, ...] = (
    Stage("choice_inputs", prepare_choice_inputs),
    Stage("choice_occasions", build_choice_occasions),
    Stage("choice_history", build_choice_history),
    # before the sets: choice_occasion_sets carries each chooser's row (see build_choice_sets)
    Stage("choosers", build_choosers),
    Stage("choice_sets", build_choice_sets),
    Stage("choices", build_choices),
)

# with choices off: no stale choice table stays behind (run with the market-level stages)
CHOICES_OFF_STAGES: tuple[Stage, ...] = (Stage("choice_tables_dropped", drop_choice_tables),)
