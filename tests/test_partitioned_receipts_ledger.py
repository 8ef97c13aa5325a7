"""The coordinator's receipts ledger refuses a file version its partitions read differently.

Unit checks of `partitioned/receipts_ledger.check_partitions_agree` on hand-built partition
versions: no sample build needed.
"""

from __future__ import annotations

import duckdb
import pytest

from demandprep.errors import UserError
from demandprep.partitioned.receipts_ledger import check_partitions_agree

HINT = (
    "Hint: run the partitioned build again; if it repeats, remove the partitions' folders under "
    "partitioning.root to rebuild them from their files."
)


def versions(rows: list[tuple]) -> duckdb.DuckDBPyConnection:
    """A connection holding `partitioned_versions` as record_receipts_files builds it."""
    con = duckdb.connect()
    con.execute(
        "create temp table partitioned_versions (path varchar, sha256 varchar, rows_read bigint, "
        "bytes bigint, status varchar, reason varchar)"
    )
    con.executemany("insert into partitioned_versions values (?, ?, ?, ?, ?, ?)", rows)
    return con


def test_partitions_that_read_a_file_alike_pass() -> None:
    con = versions(
        [
            ("/r/day1.csv.gz", "aa", 120, 4096, "current", None),
            ("/r/day1.csv.gz", "aa", 120, 4096, "current", None),
            ("/r/day2.csv.gz", "bb", 0, 0, "empty", "no lines"),
        ]
    )
    check_partitions_agree(con, {"/r/day1.csv.gz": "aa", "/r/day2.csv.gz": "bb"})


def test_partitions_disagreeing_on_rows_read_is_one_line_naming_the_file() -> None:
    con = versions(
        [
            ("/r/day1.csv.gz", "aa", 120, 4096, "current", None),
            ("/r/day2.csv.gz", "bb", 75, 2048, "current", None),
            ("/r/day2.csv.gz", "bb", 74, 2048, "current", None),
        ]
    )
    with pytest.raises(UserError) as raised:
        check_partitions_agree(con, {"/r/day1.csv.gz": "aa", "/r/day2.csv.gz": "bb"})
    assert raised.value.one_line() == (
        "/r/day2.csv.gz: the partitions disagree on this receipts file version, so the "
        f"coordinator cannot ledger it. {HINT}"
    )


def test_a_file_no_partition_read_is_one_line_naming_the_file() -> None:
    con = versions([("/r/day1.csv.gz", "aa", 120, 4096, "current", None)])
    with pytest.raises(UserError) as raised:
        check_partitions_agree(con, {"/r/day1.csv.gz": "aa", "/r/day3.csv.gz": "cc"})
    assert raised.value.one_line() == (
        "/r/day3.csv.gz: no partition read this receipts file version, so the coordinator "
        f"cannot ledger it. {HINT}"
    )
