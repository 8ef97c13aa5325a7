"""`manifest.json`: what a build was made from, what it holds, how long it took, what it noticed."""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import date, datetime
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pyarrow as pa

from demandprep import __version__
from demandprep.choices.pseudonyms import configured_key_fingerprint
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.fingerprints import code_fingerprint

MANIFEST_NAME = "manifest.json"
HASH_BLOCK = 1 << 20


@dataclass
class OutputFile:
    """One file of the build folder, with rows and columns when it holds a table."""

    path: Path
    rows: int | None = None
    schema: pa.Schema | None = None
    derived_from: str | None = None
    notes: list[str] = field(default_factory=list)
    sha256: str | None = None  # when the writer hashed the bytes as it wrote them


def file_sha256(path: Path) -> str:
    """The sha256 of a file's bytes, read in blocks."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        while block := handle.read(HASH_BLOCK):
            digest.update(block)
    return digest.hexdigest()


def output_record(folder: Path, output: OutputFile) -> dict[str, Any]:
    """The manifest entry for one output: relative path, bytes, sha256, rows and columns."""
    record: dict[str, Any] = {
        "path": output.path.relative_to(folder).as_posix(),
        "bytes": output.path.stat().st_size,
        "sha256": output.sha256 or file_sha256(output.path),
    }
    if output.rows is not None:
        record["rows"] = output.rows
    if output.schema is not None:
        record["columns"] = [{"name": f.name, "type": str(f.type)} for f in output.schema]
    if output.derived_from is not None:
        record["derived_from"] = output.derived_from
    return record


def input_records(con: duckdb.DuckDBPyConnection) -> list[dict[str, Any]]:
    """Every current input file from the ledger: source, path, version, bytes, sha256, rows."""
    rows = con.execute(
        "select source, path, version, bytes, sha256, rows_read from ledger "
        "where status = 'current' order by source, path, version"
    ).fetchall()
    names = ("source", "path", "version", "bytes", "sha256", "rows")
    return [dict(zip(names, row, strict=True)) for row in rows]


def build_manifest(
    ctx: BuildContext,
    build_id: str,
    built_at: datetime,
    folder: Path,
    outputs: Sequence[OutputFile],
    extra: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """The whole manifest as a JSON-ready dict."""
    # the dictionary imports pandera: `latest_build_is_current` reads this module without it
    from demandprep.export.dictionary import market_build_record

    return {
        "build_id": build_id,
        "built_at": built_at.isoformat(),
        "tool": {
            "name": "demandprep",
            "version": __version__,
            "code_fingerprint": code_fingerprint(),
        },
        "config_hash": ctx.config.config_hash(),
        "pseudonym_key_fingerprint": key_fingerprint_of(ctx.config),
        "config": ctx.config.resolved_dict(),
        "inputs": input_records(ctx.con),
        "outputs": [output_record(folder, output) for output in outputs],
        "timings_seconds": dict(ctx.timings),
        "warnings": list(ctx.warnings),
        "facts": ctx.facts,
        **build_scope(ctx),
        "market_build": market_build_record(ctx.config),
        **(extra or {}),
    }


def key_fingerprint_of(config: ProjectConfig) -> str | None:
    """The pseudonym key's fingerprint when the build makes choices (pseudonyms.py), else None."""
    choices = config.choices
    return configured_key_fingerprint(choices.enabled, choices.pseudonym_key_env)


def build_scope(ctx: BuildContext) -> dict[str, Any]:
    """`build_mode` ("full" | "incremental"), `periods_rebuilt` and why a build was full."""
    default = {
        "build_mode": "full",
        "periods_rebuilt": [],
        "full_build_reason": "this build has no market stages",
    }
    return dict(ctx.facts.get("build_scope", default))


def write_manifest(folder: Path, manifest: dict[str, Any]) -> Path:
    """Write `manifest.json` (sorted keys, two-space indent) and flush it to disk."""
    path = folder / MANIFEST_NAME
    text = json.dumps(
        _finite(manifest), indent=2, sort_keys=True, default=_json_value, allow_nan=False
    )
    with path.open("w", encoding="utf-8") as handle:
        handle.write(text + "\n")
        handle.flush()
        os.fsync(handle.fileno())
    return path


def _finite(value: Any) -> Any:
    """NaN and infinities (e.g. an F statistic with no residual variance) become null."""
    if isinstance(value, dict):
        return {key: _finite(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(item) for item in value]
    if isinstance(value, float | np.floating) and not np.isfinite(value):
        return None
    return value


def _json_value(value: Any) -> Any:
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, set | frozenset | tuple):
        return sorted(value)
    raise TypeError(f"manifest value of type {type(value).__name__} is not JSON-ready")
