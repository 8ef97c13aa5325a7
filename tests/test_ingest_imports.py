"""`demandprep ingest` loads only what the ingest needs: no build step, no scipy.

Each import costs CPU in every ingest process (the build stages with scipy: about 0.8 s), so the
modules the `ingest` command runs must not import the stage list.
"""

from __future__ import annotations

import subprocess
import sys

# what the `ingest` command imports (cli.ingest), in a fresh interpreter
INGEST_MODULES = (
    "demandprep.cli",
    "demandprep.pipeline",
    "demandprep.ingest.runner",
    "demandprep.ingest.results",
    "demandprep.progress",
)
BUILD_ONLY = ("demandprep.stages", "demandprep.market.stages", "demandprep.instruments", "scipy")


def test_ingest_command_imports_no_build_step() -> None:
    code = (
        "import sys\n"
        + "".join(f"import {name}\n" for name in INGEST_MODULES)
        + f"print(','.join(m for m in {BUILD_ONLY!r} if m in sys.modules))"
    )
    loaded = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout.strip()
    assert loaded == ""
