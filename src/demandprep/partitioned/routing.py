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
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, path: str, names: list[str]
) -> list[str]:
    """The partitions (by name, among `names`) whose stores and days a scan of `path` finds."""
    from demandprep.partitioned.plan import partition_name, period_ranges

    try:
        keys = file_keys_and_ranges(con, config, path)
    except duckdb.Error:
        return []  # the partitions' ingest will say what is wrong with the file
    ranges = period_ranges(config)
    found = {partition_name(key, *ranges[index]) for key, index in keys}
    return [name for name in names if name in found]


def file_keys_and_ranges(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, path: str
) -> list[tuple[str | None, int]]:
    """The (partition value, period range index) pairs of a file's lines, from two columns."""
    receipts = config.sources.receipts
    # the mapped names are the config's, quoted; the file and the settings are bound
    store = quote_identifier(receipts.columns["store"])
    sold_at = quote_identifier(receipts.columns["sold_at"])
    column = quote_identifier(config.partitioning.by)
    if receipts.format == "parquet":
        source = "read_parquet($path)"
        parameters: dict = {}
    else:
        source = (
            "read_csv($path, delim = $delimiter, header = $header, all_varchar = true, "
            "ignore_errors = true, null_padding = true)"
        )
        parameters = {"delimiter": receipts.delimiter, "header": receipts.header}
    rows = con.execute(
        f"with lines as (select distinct {store}::varchar as store, "  # noqa: S608
        f"coalesce(try_strptime({sold_at}::varchar, $format), "
        f"try_cast({sold_at}::varchar as timestamp))::date as day from {source}), "
        f"keyed as (select store, {column}::varchar as key from stores) "
        "select distinct keyed.key, len(list_filter($bounds, lambda bound: bound <= lines.day)) "
        "from lines join keyed using (store) where lines.day is not null",
        {
            "path": path,
            "format": receipts.timestamp_format,
            "bounds": sorted(set(config.partitioning.period_boundaries)),
            **parameters,
        },
    ).fetchall()
    return [(key, index) for key, index in rows]


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
    for path, sha256 in sorted(files.items()):
        if has_placement(placements, path, sha256):
            targets = placed_partitions(placements, path, sha256)
        else:
            targets = set(hinted_partitions(con, config, path, names))
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
