"""Ingest every configured source: references first, then receipts, in atomic batches.

New and changed files of a source are read in batches (consecutive files, up to BATCH_BYTES
and BATCH_FILES; a large file is a batch alone), each in a single DuckDB transaction: the older
versions' rows go, the accepted rows and the quarantined lines come in, the ledger rows are
written, and `rows read = accepted + quarantined` is verified per file before COMMIT. A crash
at any point leaves the warehouse as it was before the batch; the next run ingests its files
whole. When a batch fails (a file cannot be read, or its header lacks a mapped column), it is
rolled back and its files are retried one by one: the broken file is ledgered as failed (with
its reason) and reported, the others go in. A file past its source's reject limit (refusal.py)
is rolled back too and ledgered as refused; the batch's other files are loaded again without
it. A ledger mismatch stops the run. `rows read` is each file's count of records from its
physical lines (reader.py), not from the parser's output. A file without records (zero bytes,
or a header alone) is ledgered `empty` with its reason and reported as a warning (status
'empty'), not a failure; it is read again only when its checksum or its settings change.

Files are read again when their checksum or their source's reading settings changed (files.py),
or when `reload` names their source or matches their path; a reference source read again for
its settings (a changed column mapping included) is emptied first, inside the first batch's
transaction, so its columns and their types are worked out afresh. A source whose globs match
nothing while the warehouse holds its files keeps them, with a warning in the summary.

Progress: `progress(event, **info)` is called with
- "start": files (count of files found), bytes (total size of the files to read);
- "file_start": source, path, status ('new'|'unchanged'|'changed'), bytes;
- "file_step": source, path (first file of the batch), paths, step ('staged' with rows read,
  then 'inserting' just before accepted rows are written);
- "file_done": source, path, status ('new'|'unchanged'|'replaced'|'failed'|'refused'|'empty'),
  rows (read),
  accepted, quarantined, error;
- "done": summary (the IngestSummary).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import replace
from pathlib import Path
from typing import Any

import duckdb

from demandprep.config import ProjectConfig
from demandprep.errors import UserError
from demandprep.ingest import ledger
from demandprep.ingest.files import (
    DiscoveredFile,
    configured_sources,
    current_versions,
    discover_source,
    discovery_warnings,
    held_back_versions,
    record_stamps,
    reload_targets,
    stamp_records,
)
from demandprep.ingest.loaders import Loader, ReceiptLoader, ReferenceLoader
from demandprep.ingest.moves import recognise_moves
from demandprep.ingest.reader import (
    FileRefused,
    FileUnreadable,
    create_source_view,
    drop_staging,
    first_line,
    render_quarantined,
    stage_files,
)
from demandprep.ingest.receipts import prepare_receipts
from demandprep.ingest.references import (
    REFERENCE_SPECS,
    drop_reference_storage,
    layout_changed,
    table_columns,
)
from demandprep.ingest.refusal import FilesRefused, Refusal, refusals
from demandprep.ingest.results import FileResult, IngestSummary, summary_table
from demandprep.ingest.timings import PhaseTimer, record_timings
from demandprep.ingest.unlisted_keys import files_with_unlisted_keys, remember_listed_keys
from demandprep.memory import out_of_memory_error, out_of_memory_reported
from demandprep.personal import carries_cards
from demandprep.sqlfiles import run_sql

BATCH_BYTES = 16 * 1024 * 1024  # ~1.3M lines of gzip CSV: staging stays well in memory
BATCH_FILES = 256
# rounds of reading again in one run (_read_stale_again): a file read again for a key no
# longer listed can leave a duplicate's file stale, read in the next round
REREAD_PASSES = 3

Progress = Callable[..., Any]

__all__ = [
    "DiscoveredFile",
    "FileResult",
    "IngestSummary",
    "Progress",
    "discover_files",
    "ensure_tables",
    "ingest_all",
    "ingest_batch",
    "ingest_file",
    "summary_table",
]


def ensure_tables(con: duckdb.DuckDBPyConnection) -> None:
    """Create the ingest's tables and session macros when missing."""
    con.execute("set enable_progress_bar = false")  # the CLI draws its own progress
    run_sql(con, "ingest/000_ingest_tables.sql")
    run_sql(con, "ingest/005_ingest_macros.sql")


def discover_files(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    reload: list[str] | None = None,
    reread: dict[str, frozenset[Path]] | None = None,
) -> list[DiscoveredFile]:
    """Every input file of every source, in load order, as new, unchanged or changed.

    `reload`: source names or globs of paths whose files are read again whatever the ledger says;
    `reread`: source name -> the paths read again likewise (stale_verdicts).
    """
    ensure_tables(con)
    known = current_versions(con)
    held_back = held_back_versions(con)
    targets = reload_targets(config, reload) if reload else {}
    for name, paths in (reread or {}).items():
        targets[name] = targets.get(name, frozenset()) | paths
    records = stamp_records(con)
    found = []
    for name, source in configured_sources(config):
        spec = REFERENCE_SPECS.get(name)
        # Why, beside the fingerprint: ledger rows written before fingerprints existed count as
        # read with today's settings, so a changed mapping shows only in the stored columns
        reload_all = spec is not None and layout_changed(con, spec, source)
        found += discover_source(
            name,
            source.resolved_files(),
            known,
            reload_all,
            fingerprint=source.settings_fingerprint(),
            held_back=held_back,
            reload=targets.get(name, frozenset()),
            workers=config.warehouse.threads,
            records=records,
        )
    found = recognise_moves(con, found)
    record_stamps(con, found)
    return mark_source_rebuilds(con, found)


def ingest_all(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    progress: Progress | None = None,
    reload: list[str] | None = None,
) -> IngestSummary:
    """Ingest every new or changed file of every source; returns what happened to each file.

    The seconds of each phase go to `summary.timings_seconds` and the `ingest_runs` table.
    DuckDB running out of memory is one line naming the limit (memory.py).
    """
    with out_of_memory_reported("ingest", config.warehouse, "ingest again"):
        return _ingest_every_file(con, config, progress, reload)


def _ingest_every_file(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    progress: Progress | None,
    reload: list[str] | None,
) -> IngestSummary:
    started = time.perf_counter()
    notify = progress or _ignore
    timer = PhaseTimer()
    ensure_tables(con)
    with timer.phase("discover"):
        warnings = discovery_warnings(con, config)
        discovered = discover_files(con, config, reload)
    to_read = [item for item in discovered if item.status != "unchanged"]
    notify("start", files=len(discovered), bytes=sum(item.bytes for item in to_read))
    # reported when read again (after the night's files), unless a refusal keeps them waiting
    waiting = set(refused_since_last_change(con))
    stale = stale_verdicts(con)
    again = {
        (item.source, item.path)
        for item in discovered
        if _is_stale(item, stale) and (item.source, item.path) not in waiting
    }
    summary = IngestSummary(warnings=warnings)
    for item in discovered:
        if item.status == "unchanged" and (item.source, item.path) not in again:
            _report(notify, summary, _unchanged(item))
    _read_files(con, config, to_read, notify, summary, timer)
    _read_stale_again(con, config, notify, summary, timer)
    # after the re-reads: a refused file read and kept tonight is no longer held back
    read = {(item.source, item.path) for item in summary.files if item.status != "unchanged"}
    summary.warnings += still_refused(
        [item for item in discovered if (item.source, item.path) not in read]
    )
    summary.timings_seconds = dict(timer.seconds)
    record_timings(con, summary.timings_seconds, time.perf_counter() - started)
    notify("done", summary=summary)
    return summary


def stale_verdicts(con: duckdb.DuckDBPyConnection) -> dict[str, frozenset[Path]]:
    """Source -> paths of its current files with a verdict that may be stale (075): lines
    quarantined as unknown_sku or unknown_store before the catalogue or stores table they were
    judged against changed, or as duplicate_line before a receipts file of their day left."""
    if not (table_columns(con, "catalogue") and table_columns(con, "stores")):
        return {}  # before the first references are in, no verdict can be stale
    found: dict[str, set[Path]] = {}
    for source, path in run_sql(con, "ingest/075_stale_verdicts.sql").fetchall():
        found.setdefault(source, set()).add(Path(path))
    return {source: frozenset(paths) for source, paths in found.items()}


def refused_since_last_change(con: duckdb.DuckDBPyConnection) -> list[tuple[str, Path]]:
    """(source, path) of the files whose latest reading was refused after the last change that
    could turn a verdict (076): not read again for a stale verdict until the next change."""
    rows = run_sql(con, "ingest/076_refused_since_last_change.sql").fetchall()
    return [(source, Path(path)) for source, path in rows]


def judge_stale_again(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> list[FileResult]:
    """Read again the files with a verdict that is stale now (after a withdrawal, or after the
    nightly flow's files); their results."""
    ensure_tables(con)
    summary, timer = IngestSummary(), PhaseTimer()
    _read_stale_again(con, config, _ignore, summary, timer)
    return summary.files


def _read_stale_again(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    notify: Progress,
    summary: IngestSummary,
    timer: PhaseTimer,
) -> None:
    """After the night's files, read again those with a stale verdict (stale_verdicts) or with
    rows of a SKU or store no longer listed (unlisted_keys.py): the files read tonight were
    judged against today's references and receipts. A file read again for a key no longer
    listed may take the accepted copy of another file's duplicate with it, so the verdicts are
    looked at again after each pass (each file is read again once per run)."""
    unlisted = files_with_unlisted_keys(con)
    stale = _merged(stale_verdicts(con), unlisted)
    # a reading of the same bytes refused after the last change is not tried again each night
    done = set(refused_since_last_change(con))
    for _ in range(REREAD_PASSES):
        todo = {
            source: frozenset(path for path in paths if (source, path) not in done)
            for source, paths in stale.items()
        }
        todo = {source: paths for source, paths in todo.items() if paths}
        if not todo:
            break
        _read_again(con, config, todo, unlisted, notify, summary, timer)
        done |= {(source, path) for source, paths in todo.items() for path in paths}
        stale = stale_verdicts(con)
    remember_listed_keys(con, keep_dropped=not _all_read_again(unlisted, summary))


def _read_again(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    todo: dict[str, frozenset[Path]],
    unlisted: dict[str, frozenset[Path]],
    notify: Progress,
    summary: IngestSummary,
    timer: PhaseTimer,
) -> None:
    with timer.phase("discover"):
        again = discover_files(con, config, reread=todo)
    # the same bytes under the same settings: a refusal keeps the version read before (it is
    # not a reading under new settings, which would take the old rows out)
    rereads = [
        replace(item, settings_changed=False, lines_may_leave=_is_stale(item, unlisted))
        for item in again
        if _is_stale(item, todo)
    ]
    earlier = len(summary.files)
    _read_files(con, config, rereads, notify, summary, timer)
    # a file read again replaces its earlier result (unchanged) in the summary
    again_paths = {(result.source, result.path) for result in summary.files[earlier:]}
    summary.files[:earlier] = [
        result
        for result in summary.files[:earlier]
        if (result.source, result.path) not in again_paths
    ]


def _all_read_again(unlisted: dict[str, frozenset[Path]], summary: IngestSummary) -> bool:
    """True when every file with rows of a key no longer listed was read again tonight and kept.
    Not when one was refused (its version before stays, rows of the key with it), failed, waits
    after a refusal or was not in its folder: the dropped keys then stay recorded, and each
    ingest compares again until the file is read (the cost of one scan of the accepted rows a
    night while a refusal lasts)."""
    kept = {
        (result.source, result.path)
        for result in summary.files
        if result.status not in ("refused", "failed", "unchanged")
    }
    return all((source, path) in kept for source, paths in unlisted.items() for path in paths)


def _merged(*found: dict[str, frozenset[Path]]) -> dict[str, frozenset[Path]]:
    merged: dict[str, frozenset[Path]] = {}
    for paths_by_source in found:
        for source, paths in paths_by_source.items():
            merged[source] = merged.get(source, frozenset()) | paths
    return merged


def _is_stale(item: DiscoveredFile, stale: dict[str, frozenset[Path]]) -> bool:
    return item.path in stale.get(item.source, frozenset())


def _read_files(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    to_read: list[DiscoveredFile],
    notify: Progress,
    summary: IngestSummary,
    timer: PhaseTimer,
) -> None:
    """Load the files batch by batch, reporting each file's result into `summary`."""
    receipts_prepared = False
    for batch in batches(to_read):
        if batch[0].source == "receipts" and not receipts_prepared:
            with timer.phase("classify"):  # settings the receipt rules read
                prepare_receipts(con, config)  # after the stores are loaded: their timezones
            receipts_prepared = True
        for item in batch:
            notify(
                "file_start",
                source=item.source,
                path=item.path,
                status=item.status,
                bytes=item.bytes,
            )
        for result in ingest_batch(con, config, batch, progress=notify, timer=timer):
            _report(notify, summary, result)


def still_refused(discovered: list[DiscoveredFile]) -> list[str]:
    """A warning for each file refused on an earlier night and left as it was since."""
    return [
        f"{item.path}: refused before and unchanged since, so its rows are still out; fix the "
        "file or the source's settings, or read it again with --reload."
        if item.previous_file_id is None
        else f"{item.path}: refused when read again and unchanged since, so the rows of the "
        "version read before stay in; fix the file or the source's settings, or read it "
        "again with --reload."
        for item in discovered
        if item.held_back == "refused"
    ]


def _report(notify: Progress, summary: IngestSummary, result: FileResult) -> None:
    summary.files.append(result)
    notify(
        "file_done",
        source=result.source,
        path=result.path,
        status=result.status,
        rows=result.rows_read,
        accepted=result.rows_accepted,
        quarantined=result.rows_quarantined,
        error=result.error,
    )


def batches(files: list[DiscoveredFile]) -> Iterator[list[DiscoveredFile]]:
    """Consecutive files of one source, up to BATCH_BYTES and BATCH_FILES per batch."""
    batch: list[DiscoveredFile] = []
    size = 0
    for item in files:
        full = len(batch) >= BATCH_FILES or size + item.bytes > BATCH_BYTES
        if batch and (item.source != batch[0].source or full):
            yield batch
            batch, size = [], 0
        batch.append(item)
        size += item.bytes
    if batch:
        yield batch


def loader_for(config: ProjectConfig, source_name: str, timer: PhaseTimer | None = None) -> Loader:
    """The loader of one configured source; it times its checks with `timer`."""
    source = getattr(config.sources, source_name)
    timer = timer or PhaseTimer()
    if source_name == "receipts":
        return ReceiptLoader(source, config, timer)
    return ReferenceLoader(source, REFERENCE_SPECS[source_name], timer)


def ingest_file(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    discovered: DiscoveredFile,
    progress: Progress | None = None,
) -> FileResult:
    """Load one discovered file in its own transaction; an unchanged file is left alone."""
    if discovered.status == "unchanged":
        return _unchanged(discovered)
    return ingest_batch(con, config, [discovered], progress)[0]


def ingest_batch(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    files: list[DiscoveredFile],
    progress: Progress | None = None,
    timer: PhaseTimer | None = None,
) -> list[FileResult]:
    """Load new or changed files of one source in one transaction (file by file if it fails).

    `timer` adds the seconds of each phase (timings.py) to the run's totals.
    """
    timer = timer or PhaseTimer()
    ensure_tables(con)
    loader = loader_for(config, files[0].source, timer)
    con.execute("begin transaction")
    try:
        if files[0].source == "receipts":
            _ensure_receipt_settings(con, config)
        _reset_for_new_settings(con, files)
        results = _load_batch(con, loader, files, progress or _ignore, timer)
        con.execute("commit")
    except FilesRefused as refused:
        con.execute("rollback")
        drop_staging(con)
        return _without_refused(con, config, files, refused.refusals, progress, timer)
    except (FileRefused, UserError, duckdb.Error) as error:
        con.execute("rollback")
        if len(files) > 1:
            # file by file: one file may fit in memory where the batch did not
            return [
                item for one in files for item in ingest_batch(con, config, [one], progress, timer)
            ]
        if isinstance(error, duckdb.OutOfMemoryException):
            # not the file's fault: nothing is ledgered, the ingest stops
            raise out_of_memory_error("ingest", config.warehouse, "ingest again") from error
        return [_failed(con, files[0], _quotable(error, loader))]
    except BaseException:
        con.execute("rollback")
        raise
    finally:
        _drop_staging_after_batch(con)
    return results


def _drop_staging_after_batch(con: duckdb.DuckDBPyConnection) -> None:
    """drop_staging, except when DuckDB has no memory left for it while an error is on its way
    out: that error says why, and the temporary tables go with the connection."""
    on_its_way = sys.exc_info()[1]
    try:
        drop_staging(con)
    except duckdb.OutOfMemoryException:
        if on_its_way is None:
            raise


def _without_refused(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    files: list[DiscoveredFile],
    refused: dict[Path, Refusal],
    progress: Progress | None,
    timer: PhaseTimer,
) -> list[FileResult]:
    """Ledger the refused files of a rolled-back batch and load its other files again."""
    rest = [item for item in files if item.path not in refused]
    again = ingest_batch(con, config, rest, progress, timer) if rest else []
    loaded = {result.path: result for result in again}
    results = []
    for item in files:
        if item.path in refused:
            results.append(_refused(con, item, refused[item.path]))
        else:
            results.append(loaded[item.path])
    return results


def mark_source_rebuilds(
    con: duckdb.DuckDBPyConnection, discovered: list[DiscoveredFile]
) -> list[DiscoveredFile]:
    """Flag the files of each reference source whose every current file is read again (new
    settings, new content, a reload): only then may its table be rebuilt from nothing (no other
    file's rows lost), its column types taken afresh from the new files."""
    current = _current_ids(con)
    marked = []
    for name in dict.fromkeys(item.source for item in discovered):
        files = [item for item in discovered if item.source == name]
        reread = {item.previous_file_id for item in files if item.status == "changed"}
        rebuild = name in REFERENCE_SPECS and bool(reread) and current.get(name, set()) <= reread
        marked += [replace(item, rebuilds_source=rebuild) for item in files]
    return marked


def _current_ids(con: duckdb.DuckDBPyConnection) -> dict[str, set[str]]:
    """Source -> the file ids of its current (or empty) versions."""
    current: dict[str, set[str]] = {}
    for (source, _path), version in current_versions(con).items():
        current.setdefault(source, set()).add(version.file_id)
    return current


def _reset_for_new_settings(con: duckdb.DuckDBPyConnection, files: list[DiscoveredFile]) -> None:
    """Empty a reference source whose every file is read again, so its types are sniffed afresh.

    Only the first batch of the source does it: once one file is in with the new settings,
    the later batches replace their own files' rows only. A source read again for new content
    is emptied when this batch replaces every current file of it (one batch, as a catalogue).
    """
    first = files[0]
    spec = REFERENCE_SPECS.get(first.source)
    if spec is None or not any(item.rebuilds_source for item in files):
        return
    replaced = {item.previous_file_id for item in files}
    if (
        not ledger.has_current_with(con, first.source, first.settings_fingerprint)
        or _current_ids(con).get(first.source, set()) <= replaced
    ):
        drop_reference_storage(con, spec)


def _load_batch(
    con: duckdb.DuckDBPyConnection,
    loader: Loader,
    files: list[DiscoveredFile],
    notify: Progress,
    timer: PhaseTimer,
) -> list[FileResult]:
    source, first = loader.source, files[0].path
    with timer.phase("insert"):
        batch = ledger.assign_versions(con, files[0].source, files)
        ledger.create_batch_table(con, batch)
        if any(item.previous_file_id for item in files):
            _remove_previous(con, loader, files)
    step = {"source": files[0].source, "path": first, "paths": [item.path for item in files]}
    staged = stage_files(con, [item.path for item in files], source, files[0].source, timer)
    notify("file_step", step="staged", rows=sum(staged.records.values()), **step)
    ids = ledger.id_range(batch)
    with_records = [item.path for item in files if staged.records[str(item.path)]]
    if with_records:
        with timer.phase("classify"):
            create_source_view(con, staged.mapped, loader.names())
        loader.check(con, with_records[0], staged.mapped)
        notify("file_step", step="inserting", **step)
        with timer.phase("insert"):
            render_quarantined(con, staged.columns, source)
            loader.insert(con)
            run_sql(con, "ingest/050_quarantine_insert.sql")
    with timer.phase("ledger"):
        if with_records:
            loader.count_accepted(con, ids)
        else:
            # nothing but empty files: no table is created or typed from them
            run_sql(con, "ingest/059_no_accepted_counts.sql")
        counts = ledger.count_batch(con, batch)
        ledger.check_balance(batch, counts)
        refused = refusals(con, files[0].source, source, batch, counts)
    if refused:
        raise FilesRefused(refused)
    with timer.phase("validate"):
        if with_records:
            loader.validate(con, ids)
    with timer.phase("ledger"):
        ledger.record_batch(con, batch, files[0].settings_fingerprint)
    with timer.phase("validate"):
        ledger.validate_batch(con, ids)
    return [_loaded(item, counts[item.file_id], staged.lines) for item in batch]


def _remove_previous(
    con: duckdb.DuckDBPyConnection, loader: Loader, files: list[DiscoveredFile]
) -> None:
    loader.remove_previous(con)
    con.execute(
        "delete from quarantine where file_id in (select previous_file_id "
        "from ingest_batch_files where previous_file_id is not null)"
    )
    leaving = [str(item.path) for item in files if item.lines_may_leave]
    ledger.supersede_previous(con, files[0].settings_fingerprint, leaving)


def _loaded(item: ledger.BatchFile, counts: ledger.FileCounts, lines: dict[str, int]) -> FileResult:
    found = item.discovered
    status = "replaced" if found.previous_file_id else "new"
    message = None
    if counts.rows_read == 0:
        # a warning, not a failure: ledgered once, read again only when its checksum changes
        status = "empty"
        message = f"{found.path}: the file is empty" + (
            " (it has only a header)." if lines.get(str(found.path)) else "."
        )
    return FileResult(
        found.source,
        found.path,
        status,
        item.file_id,
        counts.rows_read,
        counts.rows_accepted,
        counts.quarantined,
        error=message,
    )


def _unchanged(item: DiscoveredFile) -> FileResult:
    return FileResult(item.source, item.path, "unchanged", file_id=item.previous_file_id)


def _ensure_receipt_settings(con: duckdb.DuckDBPyConnection, config: ProjectConfig) -> None:
    missing = [name for name in ("catalogue", "stores") if not table_columns(con, name)]
    if missing:
        raise UserError(
            f"the {' and '.join(missing)} table is not loaded, so receipts cannot be checked.",
            "fix the reference file reported above and run ingest again.",
        )
    exists = con.execute(
        "select count(*) from duckdb_tables() where table_name = 'ingest_store_timezones'"
    ).fetchone()[0]
    if not exists:
        prepare_receipts(con, config)


def _quotable(error: Exception, loader: Loader) -> Exception:
    """The error, or for a card-bearing source a database error without DuckDB's text."""
    if not isinstance(error, duckdb.Error) or not carries_cards(loader.source.columns):
        return error
    # Why: DuckDB quotes the value it choked on, and any field of this source may hold a card id
    withheld = type(error)(
        f"the database refused the file ({type(error).__name__}); its message is withheld "
        "because the source holds card ids."
    )
    return withheld


def _failed(con: duckdb.DuckDBPyConnection, item: DiscoveredFile, error: Exception) -> FileResult:
    message = error.one_line() if isinstance(error, UserError) else first_line(error)
    if not message.startswith(str(item.path)):
        message = f"{item.path}: {message}"
    file_id = ledger.record_failure(con, item, "failed", _without_path(message, item))
    # opening or decoding failed (worth another attempt), not the file's content
    unreadable = isinstance(error, (FileUnreadable, duckdb.IOException))
    return FileResult(
        item.source, item.path, "failed", file_id, error=message, unreadable=unreadable
    )


def _refused(con: duckdb.DuckDBPyConnection, item: DiscoveredFile, refusal: Refusal) -> FileResult:
    # read again under new settings: the old rows were read under settings no longer in force
    file_id = ledger.record_failure(
        con, item, "refused", refusal.reason, replaces_previous=item.settings_changed
    )
    return FileResult(item.source, item.path, "refused", file_id, error=refusal.message)


def _without_path(message: str, item: DiscoveredFile) -> str:
    """The ledger's reason: the message without the path the ledger row already holds."""
    return message.removeprefix(f"{item.path}: ")


def _ignore(event: str, **info: Any) -> None:
    """The default progress callback: nothing to show."""
