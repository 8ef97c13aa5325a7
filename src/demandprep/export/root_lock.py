"""One publisher at a time per export root: an advisory lock file inside the root.

Two projects (or two runs) pointed at the same `export.root` would otherwise stage, rename,
move `latest` and prune at the same moment. The lock is the same kind as the warehouse's
writer lock: `fcntl.flock` on a file that holds the holder's pid, released when the process
ends, however it ends.
"""

from __future__ import annotations

import fcntl
import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from demandprep.errors import UserError

LOCK_FILE = ".demandprep-export.lock"
POLL_SECONDS = 0.2


@contextmanager
def export_root_lock(root: Path, timeout_seconds: float) -> Iterator[None]:
    """Hold the export root's publisher lock, waiting at most `timeout_seconds` for it."""
    root.mkdir(parents=True, exist_ok=True)
    path = root / LOCK_FILE
    with path.open("a+") as handle:
        _acquire(handle, root, path, timeout_seconds)
        handle.seek(0)
        handle.truncate()
        handle.write(str(os.getpid()))
        handle.flush()
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def _acquire(handle, root: Path, path: Path, timeout_seconds: float) -> None:
    deadline = time.monotonic() + timeout_seconds
    while True:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return
        except BlockingIOError:
            if time.monotonic() >= deadline:
                holder = path.read_text(encoding="ascii", errors="replace").strip() or "unknown"
                raise UserError(
                    f"{root}: another demandprep process (pid {holder}) is publishing to this "
                    f"export root; waited {timeout_seconds:g} s.",
                    "wait for it to finish, or give each project its own export.root.",
                ) from None
            time.sleep(POLL_SECONDS)
