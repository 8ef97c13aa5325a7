"""What the incremental builds compare from one build to the next: digests of values, and the
reference files the ledger holds now."""

from __future__ import annotations

import functools
import hashlib
import inspect
from typing import Any

import duckdb

CURRENT_REFERENCE_FILES = """
select source, sha256 from ledger
where status = 'current' and source <> 'receipts' order by all
"""


def digest(values: list[Any]) -> str:
    """A sha256 of the values' repr: equal values, equal digest."""
    return hashlib.sha256(repr(values).encode()).hexdigest()


def current_reference_files(con: duckdb.DuckDBPyConnection) -> list[tuple]:
    """(source, sha256) of every current file but the receipts, in order (the warehouse must
    have a ledger). Not the path: a file that moved with the same bytes computes the same."""
    return con.execute(CURRENT_REFERENCE_FILES).fetchall()


@functools.cache
def source_of(item: Any) -> str:
    """The source text of a class, function or module (read once per process: `inspect`
    tokenizes the whole file each time, some 5 ms a class)."""
    return inspect.getsource(item)
