"""Fault-injection runner: a fork server that runs ingest or build and kills it where asked.

Started by tests/test_fault_injection.py as `python tests/fault_runner.py`. It imports the
pipeline once, then reads one JSON command per line on stdin and answers one JSON line on
stdout. Each command runs in a forked child (so the import is paid once, not per run).
`export` writes and publishes a build from the stage tables already in the warehouse (what
`build` does after its last stage), so export boundaries are reached without rerunning stages:

    {"action": "ingest" | "build" | "export", "config": "<path>",
     "trap": {"target": "<name in TRAPS>", "call": N} | null,
     "kill_after_seconds": <float> | null, "full_report": false}

A trap wraps one boundary function of the production code in the child and sends the child
SIGKILL at its Nth call, before or after the call as TRAPS says; `kill_after_seconds` has the
parent SIGKILL the child after that delay instead. No production code carries a hook. The
answer is {"outcome": "killed" | "completed" | "error"} ("error" with a "detail").

The parent never opens the warehouse itself, so no DuckDB or thread pool is forked.
"""

from __future__ import annotations

import importlib
import json
import os
import signal
import sys
import time
import traceback
import types
from pathlib import Path

from demandprep.config import load_config
from demandprep.context import BuildContext
from demandprep.export.folder import export_build
from demandprep.pipeline import run_build, run_ingest
from demandprep.warehouse import open_warehouse

# name -> (module, attribute (dotted for a function of a module the module imported), when)
TRAPS: dict[str, tuple[str, str, str]] = {
    # ingest, per batch: read into staging / rows and ledger written, not yet committed /
    # committed (ingest_batch returns after COMMIT)
    "ingest.staged": ("demandprep.ingest.runner", "stage_files", "after"),
    "ingest.ledgered": ("demandprep.ingest.ledger", "record_batch", "after"),
    "ingest.committed": ("demandprep.ingest.runner", "ingest_batch", "after"),
    # build: before the Nth stage runs (stage N - 1 done)
    "build.stage": ("demandprep.stage", "run_stage", "before"),
    # export: staging folder made / Nth data file written / before the manifest / before the
    # rename into place / before `latest` moves / after `latest` moved / while pruning
    "export.staging_opened": ("demandprep.export.folder", "_mark_as_ours", "after"),
    "export.parquet": ("demandprep.export.choices_file", "write_query_parquet", "after"),
    "export.manifest": ("demandprep.export.build", "write_manifest", "before"),
    "export.rename": ("demandprep.export.folder", "os.rename", "before"),
    "export.latest": ("demandprep.export.folder", "os.replace", "before"),
    "export.latest_moved": ("demandprep.export.folder", "_point_latest", "after"),
    # prune: a doomed build parked in .staging (2nd rename of a build), not yet deleted
    "export.pruning": ("demandprep.export.folder", "os.rename", "after"),
}

CALLS: dict[str, int] = {}


def kill_self() -> None:
    """End this process the way a power cut or the OOM killer would: no cleanup at all."""
    os.kill(os.getpid(), signal.SIGKILL)


def install_trap(target: str, call: int) -> None:
    """Wrap the boundary function so the process dies at its `call`-th call."""
    module_name, attribute, when = TRAPS[target]
    owner = importlib.import_module(module_name)
    if "." in attribute:
        # a module the boundary's module imported (os, shutil): give that module a private
        # copy of it, so only the boundary module's own calls are counted and trapped
        inner_name, attribute = attribute.split(".")
        inner = getattr(owner, inner_name)
        copy = types.ModuleType(inner.__name__)
        copy.__dict__.update(vars(inner))
        setattr(owner, inner_name, copy)
        owners = [copy]
    else:
        owners = modules_holding(getattr(owner, attribute))
    original = getattr(owners[0], attribute)

    def trapped(*args, **kwargs):
        CALLS[target] = CALLS.get(target, 0) + 1
        if when == "before" and CALLS[target] == call:
            kill_self()
        result = original(*args, **kwargs)
        if when == "after" and CALLS[target] == call:
            kill_self()
        return result

    for holder in owners:
        setattr(holder, attribute, trapped)


def modules_holding(function) -> list[types.ModuleType]:
    """Every loaded demandprep module with a global bound to `function` (its own module first):
    a caller that did `from module import function` holds its own reference."""
    home = sys.modules[function.__module__]
    others = [
        module
        for name, module in sorted(sys.modules.items())
        if name.startswith("demandprep")
        and module is not home
        and getattr(module, function.__name__, None) is function
    ]
    return [home, *others]


def one_line_report(ctx, staging_dir: Path, inputs) -> Path:
    """A stand-in for the HTML report (not part of the byte-identity promise; 2 s of plots)."""
    path = staging_dir / "report.html"
    path.write_text(f"<!DOCTYPE html><title>{inputs.build_id}</title>", encoding="utf-8")
    return path


def run_child(command: dict) -> None:
    """The forked child: set the trap, run the action, exit 0 (or 1 with the error on stderr)."""
    try:
        if not command.get("full_report"):
            importlib.import_module("demandprep.export.build").write_report = one_line_report
        trap = command.get("trap")
        if trap:
            install_trap(trap["target"], int(trap["call"]))
        config = load_config(Path(command["config"]))
        if command["action"] == "ingest":
            run_ingest(config)
        elif command["action"] == "build":
            run_build(config)
        else:
            with open_warehouse(config.warehouse) as con:
                export_build(BuildContext(con=con, config=config))
    except BaseException:
        traceback.print_exc(file=sys.stderr)
        sys.stderr.flush()
        os._exit(1)
    os._exit(0)


def serve(command: dict) -> dict:
    """Run one command in a forked child and say how it ended."""
    sys.stdout.flush()
    sys.stderr.flush()
    pid = os.fork()
    if pid == 0:
        run_child(command)
    delay = command.get("kill_after_seconds")
    if delay is not None:
        deadline = time.monotonic() + float(delay)
        while time.monotonic() < deadline:
            done, status = os.waitpid(pid, os.WNOHANG)
            if done:
                return _outcome(status)
            time.sleep(0.01)
        os.kill(pid, signal.SIGKILL)
    _, status = os.waitpid(pid, 0)
    return _outcome(status)


def _outcome(status: int) -> dict:
    if os.WIFSIGNALED(status) and os.WTERMSIG(status) == signal.SIGKILL:
        return {"outcome": "killed"}
    if os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0:
        return {"outcome": "completed"}
    return {"outcome": "error", "detail": f"wait status {status}"}


def main() -> None:
    """Answer each command line on stdin with one outcome line on stdout."""
    for line in sys.stdin:
        if line.strip():
            print(json.dumps(serve(json.loads(line))), flush=True)


if __name__ == "__main__":
    main()
