"""Build stages of this step, in order (filled in by its owner)."""

from demandprep.stages import Stage

CHOICE_STAGES: tuple[Stage, ...] = ()
