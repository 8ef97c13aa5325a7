"""A night with nothing new rebuilds when demandprep's own code changed (an upgrade or a local
edit): `latest` is current only if this very code made it."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from test_incremental_build import private_world

from demandprep import pipeline
from demandprep.config import load_config
from demandprep.export.folder import latest_build
from demandprep.fingerprints import code_fingerprint, folder_fingerprint

pytestmark = pytest.mark.usefixtures("one_line_report")


def test_the_code_fingerprint_follows_every_code_file_and_the_version(tmp_path: Path) -> None:
    sql = Path(__file__).parents[1] / "sql"
    copy = tmp_path / "sql"
    shutil.copytree(sql, copy)
    before = folder_fingerprint("0.1.0", [copy])
    assert folder_fingerprint("0.1.0", [copy]) == before
    assert folder_fingerprint("0.2.0", [copy]) != before
    step = copy / "market" / "130_shares.sql"
    text = step.read_text(encoding="utf-8")
    step.write_text(text + "\n-- one more comment\n", encoding="utf-8")
    assert folder_fingerprint("0.1.0", [copy]) != before
    step.write_text(text, encoding="utf-8")
    # compiled caches are not code: Python writes them whenever it likes
    (copy / "__pycache__").mkdir(exist_ok=True)
    (copy / "__pycache__" / "x.cpython-311.pyc").write_bytes(b"\0" * 16)
    assert folder_fingerprint("0.1.0", [copy]) == before


def test_a_night_after_the_code_changed_rebuilds_though_nothing_new(
    tmp_path: Path, coffee_sample: Path
) -> None:
    world = private_world(tmp_path, coffee_sample)
    config = load_config(world / "demandprep.toml")
    pipeline.run_ingest(config)
    first = pipeline.build_unless_current(config)
    assert not first.skipped
    manifest_path = first.folder / "manifest.json"
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    assert manifest["tool"]["code_fingerprint"] == code_fingerprint()
    assert pipeline.build_unless_current(config).skipped
    # as another demandprep would have left it (an older one wrote no fingerprint at all)
    manifest["tool"]["code_fingerprint"] = "0" * 64
    manifest_path.write_text(json.dumps(manifest), encoding="utf-8")
    again = pipeline.build_unless_current(config)
    assert not again.skipped
    assert latest_build(config.export.root) == again.folder
    del manifest["tool"]["code_fingerprint"]
    (again.folder / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    assert not pipeline.build_unless_current(config).skipped
    assert pipeline.build_unless_current(config).skipped
