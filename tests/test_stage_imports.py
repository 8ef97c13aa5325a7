"""Imports run one way: the stage list imports the step packages, never the reverse."""

from __future__ import annotations

import subprocess
import sys

import pytest


@pytest.mark.parametrize(
    "step",
    ["demandprep.market.stages", "demandprep.instruments.stages", "demandprep.choices.stages"],
)
def test_a_step_package_does_not_import_the_stage_list(step: str) -> None:
    # a fresh interpreter, so that no other test has imported the registry already
    probe = f"import sys, {step}; print('demandprep.stages' in sys.modules)"
    result = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, check=True
    )
    assert result.stdout.strip() == "False"
