"""Which partitions read which receipts file, without the coordinator ingesting a line.

A file goes to every partition it fed before (its routing record), to every partition the
partitions' reports place its lines in (`placement`: per file version, accepted lines per
partition, counted by every partition that read it), and, for a file version no partition has
read yet, to the partitions a cheap hint names: a scan of the file's store and sale-time columns
alone (`hinted_partitions`). The hint may be wrong (a time zone moving a line across a period
boundary, a file the scan cannot read): the partitions that read the file report where its
lines belong, and the coordinator routes it there in a second round, so a wrong hint costs
time, never lines. A file the hint places nowhere (empty, unreadable, every line broken) goes
to the first partition, whose ingest ledgers it.
"""

from __future__ import annotations

from collections.abc import Iterable

import duckdb

from demandprep.config import ProjectConfig
from demandprep.sqlfiles import quote_identifier

# per file path: its checksum and its accepted lines per partition name
Placement = dict[str, dict]


def hinted_partitions(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, paths: list[str], names: list[str]
) -> dict[str, list[str]]:
    """Per file, the partitions (by name, among `names`) whose stores and days a scan finds."""
    return partitions_of(config, scanned_keys(con, config, paths), names)


def scanned_keys(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, paths: list[str]
) -> list[tuple[str, str | None, int]]:
    """The files' (path, value, range index) rows: one scan for all, halved where one fails.

    A file the scan cannot read (empty, another header) fails the scan of its half; halving
    finds it in a few scans, and it is hinted nowhere (the partitions' ingest says why).
    """
    try:
        return file_keys_and_ranges(con, config, paths)
    except duckdb.Error:
        if len(paths) == 1:
            return []
        half = len(paths) // 2
        return scanned_keys(con, config, paths[:half]) + scanned_keys(con, config, paths[half:])


def partitions_of(
    config: ProjectConfig, keys: list[tuple[str, str | None, int]], names: list[str]
) -> dict[str, list[str]]:
    """(path, value, range index) rows as each path's partition names, in `names` order."""
    from demandprep.partitioned.plan import partition_name, period_ranges

    ranges = period_ranges(config)
    found: dict[str, set[str]] = {}
    for path, key, index in keys:
        found.setdefault(path, set()).add(partition_name(key, *ranges[index]))
    return {path: [name for name in names if name in held] for path, held in found.items()}


def file_keys_and_ranges(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, paths: list[str]
) -> list[tuple[str, str | None, int]]:
    """The (path, partition value, period range index) of the files' lines, from two columns."""
    receipts = config.sources.receipts
    # the mapped names are the config's, quoted; the files and the settings are bound
    store = quote_identifier(receipts.columns["store"])
    sold_at = quote_identifier(receipts.columns["sold_at"])
    column = quote_identifier(config.partitioning.by)
    if receipts.format == "parquet":
        source = "read_parquet($paths, filename = true)"
        parameters: dict = {}
    else:
        source = (
            "read_csv($paths, delim = $delimiter, header = $header, all_varchar = true, "
            "ignore_errors = true, filename = true)"
        )
        parameters = {"delimiter": receipts.delimiter, "header": receipts.header}
    return con.execute(
        f"with lines as (select distinct filename as path, {store}::varchar as store, "  # noqa: S608
        f"coalesce(try_strptime({sold_at}::varchar, $format), "
        f"try_cast({sold_at}::varchar as timestamp))::date as day from {source}), "
        f"keyed as (select store, {column}::varchar as key from stores) "
        "select distinct lines.path, keyed.key, "
        "len(list_filter($bounds, lambda bound: bound <= lines.day)) "
        "from lines join keyed using (store) where lines.day is not null",
        {
            "paths": paths,
            "format": receipts.timestamp_format,
            "bounds": sorted(set(config.partitioning.period_boundaries)),
            **parameters,
        },
    ).fetchall()


def placed_partitions(placements: Iterable[Placement], path: str, sha256: str) -> set[str]:
    """The partitions that hold lines of this version of the file, by any partition's report."""
    found: set[str] = set()
    for placement in placements:
        entry = placement.get(path)
        if entry is not None and entry["sha256"] == sha256:
            found |= {name for name, lines in entry["lines"].items() if lines > 0}
    return found


def has_placement(placements: Iterable[Placement], path: str, sha256: str) -> bool:
    """True when some partition read this version of the file and reported its lines."""
    return any(placement.get(path, {}).get("sha256") == sha256 for placement in placements)


def route_files(
    con: duckdb.DuckDBPyConnection,
    config: ProjectConfig,
    files: dict[str, str],
    names: list[str],
    recorded: dict[str, list[str]],
    placements: list[Placement],
) -> dict[str, set[str]]:
    """Each partition's files: those it read before, those placed in it, those hinted to it."""
    routes = {name: set(recorded.get(name, [])) & files.keys() for name in names}
    unplaced = sorted(
        path for path, sha256 in files.items() if not has_placement(placements, path, sha256)
    )
    hints = hinted_partitions(con, config, unplaced, names) if unplaced else {}
    for path, sha256 in sorted(files.items()):
        if path not in unplaced:
            targets = placed_partitions(placements, path, sha256)
        else:
            targets = set(hints.get(path, []))
            if not targets and not any(path in routed for routed in routes.values()):
                targets = set(names[:1])  # someone must ledger it
        for name in targets & set(names):
            routes[name].add(path)
    return routes


def misrouted(routes: dict[str, set[str]], placements: list[Placement], files: dict[str, str]):
    """The (partition, file) pairs the reports place lines in but the routing left out."""
    missing: dict[str, set[str]] = {}
    for path, sha256 in files.items():
        for name in placed_partitions(placements, path, sha256):
            if name in routes and path not in routes[name]:
                missing.setdefault(name, set()).add(path)
    return missing
