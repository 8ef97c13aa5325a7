"""The `demandprep` command tunes its own process before numpy loads: one BLAS thread (unless
the user set one) and fewer garbage collections; the library, imported by others, leaves their
process alone."""

from __future__ import annotations

import os
import subprocess
import sys

from demandprep import __version__
from demandprep.process_tuning import COLLECT_AFTER

# what the console script runs first, in a fresh interpreter, then what it reports
ENTRY = (
    "import gc, os, sys\n"
    "import demandprep.cli as cli\n"
    "numpy_before = 'numpy' in sys.modules\n"
    "cli.tune_process()\n"
    "print(numpy_before, os.environ.get('OPENBLAS_NUM_THREADS'), gc.get_threshold()[0])\n"
)


def _entry(extra_env: dict[str, str]) -> list[str]:
    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"} | extra_env
    return subprocess.run(
        [sys.executable, "-c", ENTRY], capture_output=True, text=True, check=True, env=env
    ).stdout.split()


def test_the_command_sets_one_blas_thread_before_numpy_loads() -> None:
    assert _entry({}) == ["False", "1", str(COLLECT_AFTER)]


def test_a_blas_thread_count_the_user_set_is_kept() -> None:
    assert _entry({"OPENBLAS_NUM_THREADS": "2"})[1] == "2"


def test_importing_the_library_changes_nothing_in_the_caller() -> None:
    code = "import gc, os; {}print(gc.get_threshold(), os.environ.get('OPENBLAS_NUM_THREADS'))"
    bare, imported = (
        subprocess.run(
            [sys.executable, "-c", code.format(imports)], capture_output=True, text=True, check=True
        ).stdout
        for imports in ("", "import demandprep.cli, demandprep.pipeline; ")
    )
    assert imported == bare


def test_the_console_script_runs_the_tuning_entry() -> None:
    from importlib.metadata import entry_points

    (script,) = [e for e in entry_points(group="console_scripts") if e.name == "demandprep"]
    assert script.value == "demandprep.cli:entry"


def test_the_command_leaves_with_every_object_frozen() -> None:
    # so the interpreter's shutdown skips walking them for cycles
    code = (
        "import atexit, gc, sys\n"
        "import demandprep.cli as cli\n"
        "atexit.register(lambda: print(gc.get_freeze_count() > 1000))\n"
        "sys.argv = ['demandprep', '--version']\n"
        "cli.entry()\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0
    assert out.stdout.split() == [__version__, "True"]
