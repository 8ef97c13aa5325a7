"""An advisory lock on a file that holds the holder's pid: one process at a time.

`fcntl.flock` is released when the process ends, however it ends, so a killed holder never
leaves a lock behind. The warehouse's writer lock and the export root's publisher lock use it.
"""

from __future__ import annotations

import fcntl
import os
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

from demandprep.errors import UserError

POLL_SECONDS = 0.2

# the holder's pid (as written in the lock file, or "unknown") -> the error to raise
BusyError = Callable[[str], UserError]


@contextmanager
def pid_file_lock(path: Path, timeout_seconds: float, busy: BusyError) -> Iterator[None]:
    """Hold the lock on `path`, waiting at most `timeout_seconds`, else raise `busy(holder)`."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("a+") as handle:
        _acquire(handle, path, timeout_seconds, busy)
        handle.seek(0)
        handle.truncate()
        handle.write(str(os.getpid()))
        handle.flush()
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def _acquire(handle, path: Path, timeout_seconds: float, busy: BusyError) -> None:
    deadline = time.monotonic() + timeout_seconds
    while True:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
            return
        except BlockingIOError:
            if time.monotonic() >= deadline:
                holder = path.read_text(encoding="ascii", errors="replace").strip() or "unknown"
                raise busy(holder) from None
            time.sleep(POLL_SECONDS)
