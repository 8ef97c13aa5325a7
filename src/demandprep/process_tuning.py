"""Settings of the `demandprep` process, made by the console script before any command runs and
before numpy loads (`cli.entry`). A program importing demandprep as a library keeps its own.

- One BLAS thread (`OPENBLAS_NUM_THREADS=1`, unless the user set it). The only BLAS work is the
  first stage's and the quick logit's least squares on a few columns; OpenBLAS's worker threads
  spin after each call, and on a 2-core machine they took the second core from DuckDB. On the
  39.8M-line night without choices, CPU time fell from 4.7 to 4.0 s (user), wall about 0.1 s.
- Fewer garbage collections. Python's cycle collector starts a young-generation pass every 700
  new container objects and walks every object it holds in a full pass; importing the
  libraries (pandas, pandera, polars, pyarrow) makes several hundred thousand, so a night spent
  0.16 s in 420 passes, 0.10 s of it in three full ones. With a pass every `COLLECT_AFTER`
  new objects a night makes four (0.05 s). Cyclic garbage is still collected, later; the data itself
  lives in DuckDB and Arrow, outside the collector.
- No cycle hunt at exit. When the command is done, every object is frozen (`gc.freeze`), so the
  interpreter's shutdown does not walk them all looking for cycles: the process frees its memory
  as it exits anyway, and the command closed its warehouse and files itself. The same night
  took 4.07 to 4.11 s against 4.29 to 4.37 s (four pairs).
"""

from __future__ import annotations

import gc
import os

BLAS_THREADS = {"OPENBLAS_NUM_THREADS": "1"}
COLLECT_AFTER = 100_000  # new container objects before a young-generation pass (Python: 700)
OLDER_PASSES = 10  # young passes per middle pass, middle passes per full pass (Python: 10, 10)


def tune_process() -> None:
    """One BLAS thread unless the user chose a count, and a higher collection threshold."""
    for name, value in BLAS_THREADS.items():
        os.environ.setdefault(name, value)
    gc.set_threshold(COLLECT_AFTER, OLDER_PASSES, OLDER_PASSES)


def freeze_for_exit() -> None:
    """Move every object out of the collector's reach, for a shutdown that skips the cycle hunt."""
    gc.freeze()
