"""What the incremental builds compare from one build to the next: digests of values, and the
reference files the ledger holds now."""

from __future__ import annotations

import functools
import hashlib
import importlib.util
import inspect
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import duckdb

from demandprep import __version__

# every folder of demandprep's code: the core, its SQL, its models and its flows
CODE_PACKAGES = ("demandprep", "demandprep.sql", "demandprep.schemas", "demandprep.flows")
# what a build's outputs can depend on: code, SQL and the shipped config templates
CODE_SUFFIXES = frozenset({".py", ".sql", ".toml"})

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


@functools.cache
def code_fingerprint() -> str:
    """A sha256 of demandprep's version and of every code file it runs from: a build made by
    other code (an upgrade, or a local edit of a step) is not this code's build."""
    folders = []
    for name in CODE_PACKAGES:
        spec = importlib.util.find_spec(name)  # the package's folder, without importing it
        folders += [Path(place) for place in (spec.submodule_search_locations or [])]
    return folder_fingerprint(__version__, folders)


def folder_fingerprint(version: str, folders: Sequence[Path]) -> str:
    """A sha256 of `version` and of each code file (CODE_SUFFIXES) under `folders`, by path
    relative to its folder, in path order; a file under two of the folders counts once."""
    files: dict[Path, str] = {}
    for folder in folders:
        for path in folder.rglob("*"):
            if path.suffix in CODE_SUFFIXES and path.is_file():
                files.setdefault(path.resolve(), f"{folder.name}/{path.relative_to(folder)}")
    whole = hashlib.sha256(version.encode())
    for resolved, name in sorted(files.items(), key=lambda item: item[1]):
        whole.update(f"\0{name}\0".encode())
        whole.update(hashlib.sha256(resolved.read_bytes()).digest())
    return whole.hexdigest()
