"""What a night has to do: which files to ingest, and whether `latest` is still up to date."""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.export.folder import latest_build
from demandprep.export.manifest import MANIFEST_NAME, input_records, key_fingerprint_of
from demandprep.fingerprints import code_fingerprint

INGEST_STATUSES = ("new", "changed")


def files_to_ingest(discovered: Sequence[Any]) -> list[Any]:
    """The discovered files that are new or changed since the ledger last saw them."""
    return [item for item in discovered if item.status in INGEST_STATUSES]


def latest_build_is_current(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> bool:
    """True when `latest` was built from exactly the warehouse's current inputs and this config,
    by this very code (an upgrade or an edited step rebuilds)."""
    # Compared with the manifest rather than with tonight's discoveries, so a night that ingested
    # files and then failed is rebuilt the next night even when no further file arrives.
    latest = latest_build(config.export.root)
    manifest_path = latest / MANIFEST_NAME if latest is not None else None
    if manifest_path is None or not manifest_path.is_file():
        return False
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    return (
        manifest.get("config_hash") == config.config_hash()
        and manifest.get("tool", {}).get("code_fingerprint") == code_fingerprint()
        # another pseudonym key gives every chooser and occasion another id
        and manifest.get("pseudonym_key_fingerprint") == key_fingerprint_of(config)
        and _input_keys(manifest.get("inputs", [])) == _input_keys(input_records(con))
    )


def _input_keys(records: Sequence[dict[str, Any]]) -> set[tuple[str, str, str]]:
    return {(str(r["source"]), str(r["path"]), str(r["sha256"])) for r in records}
