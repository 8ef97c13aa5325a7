"""One publisher at a time per export root: an advisory lock file inside the root.

Two projects (or two runs) pointed at the same `export.root` would otherwise stage, rename,
move `latest` and prune at the same moment. The lock is the same kind as the warehouse's
writer lock: `fcntl.flock` on a file that holds the holder's pid, released when the process
ends, however it ends.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from demandprep.errors import UserError
from demandprep.file_lock import pid_file_lock

LOCK_FILE = ".demandprep-export.lock"


@contextmanager
def export_root_lock(root: Path, timeout_seconds: float) -> Iterator[None]:
    """Hold the export root's publisher lock, waiting at most `timeout_seconds` for it."""

    def busy(holder: str) -> UserError:
        return UserError(
            f"{root}: another demandprep process (pid {holder}) is publishing to this "
            f"export root; waited {timeout_seconds:g} s.",
            "wait for it to finish, or give each project its own export.root.",
        )

    with pid_file_lock(root / LOCK_FILE, timeout_seconds, busy):
        yield
