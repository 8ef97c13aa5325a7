"""Parquet splicing: an earlier file's first row groups and a new file's row groups give the
bytes pyarrow writes for all the rows at once (the reference is pyarrow's own whole write)."""

from __future__ import annotations

import errno
import hashlib
import os
from pathlib import Path

import duckdb
import pyarrow.parquet as pq
import pytest

from demandprep.export.choices_file import row_groups_before
from demandprep.export.manifest import file_sha256
from demandprep.export.parquet import write_query_parquet
from demandprep.export.parquet_splice import (
    SpliceRefused,
    read_footer,
    splice_refusal,
    write_spliced,
)
from demandprep.export.thrift_compact import RawStruct, encode_struct, read_struct

ROWS_PER_GROUP = 1024
KEYS = ("occasion", "alternative")
COLUMNS = (
    "occasion, alternative, chosen, price, loyalty, options, day, "
    "case when i % 7 = 0 then null else i * 3 end as count"
)


@pytest.fixture()
def con() -> duckdb.DuckDBPyConnection:
    """Two tables sharing their first 6,000 rows; the second has other values after them
    (one column changed, others not) and more rows."""
    con = duckdb.connect()
    con.execute(
        """
        create table rows_before as
        select
            i,
            printf('2025-01-%02d:%08d', 1 + i // 2000, i // 4) as occasion,
            'alt' || (i % 4) as alternative,
            i % 4 = 0 as chosen,
            round(1.5 + (i % 97) / 7.0, 4) as price,
            sin(i) as loyalty,
            ['a', 'b', 'c'][1:1 + i % 3] as options,
            date '2025-01-01' + cast(i // 2000 as integer) as day,
        from range(20000) as t(i)
        """
    )
    con.execute(
        "create table rows_after as "
        "select * replace (case when i >= 6000 then price + 1 else price end as price) "
        "from rows_before union all "
        "select * replace (printf('2025-01-31:%08d', i) as occasion) from rows_before "
        "where i < 3333"
    )
    return con


def write(con: duckdb.DuckDBPyConnection, table: str, path: Path, where: str = "") -> Path:
    """The table's rows in key order, written the way the export writes a data file."""
    sql = f"select {COLUMNS} from {table} {where} order by occasion, alternative"  # noqa: S608
    write_query_parquet(con, sql, {}, path, ROWS_PER_GROUP, {}, {"demandprep.table": "probe"}, KEYS)
    return path


def test_footers_read_and_written_back_are_pyarrows_bytes(con, tmp_path):
    path = write(con, "rows_before", tmp_path / "whole.parquet")
    footer = read_footer(path)
    data = path.read_bytes()
    encoded = data[footer.start : -8]
    fields, end = read_struct(encoded)
    assert end == len(encoded)
    assert encode_struct(fields) == encoded
    assert len(footer.row_groups) == pq.ParquetFile(path).metadata.num_row_groups == 20


def refuse_kernel_copy(source, out, count, offset_src=None, offset_dst=None):
    """os.copy_file_range as on file systems that cannot copy between these files."""
    raise OSError(errno.EXDEV, "Invalid cross-device link")


@pytest.mark.parametrize("kernel_copy", [True, False], ids=["kernel copy", "read and write"])
@pytest.mark.parametrize("keep", [1, 5])
def test_kept_row_groups_and_new_ones_give_the_whole_write_bytes(
    con, tmp_path, keep, kernel_copy, monkeypatch
):
    if not kernel_copy:
        monkeypatch.setattr(os, "copy_file_range", refuse_kernel_copy)
    before = write(con, "rows_before", tmp_path / "before.parquet")
    whole = write(con, "rows_after", tmp_path / "whole.parquet")
    last_kept = pq.read_table(before).slice(keep * ROWS_PER_GROUP - 1, 1).to_pylist()[0]
    tail = write(
        con,
        "rows_after",
        tmp_path / "tail.parquet",
        f"where (occasion, alternative) > ('{last_kept['occasion']}', "
        f"'{last_kept['alternative']}')",
    )
    kept, written = read_footer(before), read_footer(tail)
    assert splice_refusal(kept, keep, written, ROWS_PER_GROUP) is None
    target = tmp_path / "spliced.parquet"
    sha256, _bounds = write_spliced(before, kept, keep, file_sha256(before), tail, written, target)
    assert target.read_bytes() == whole.read_bytes()
    assert sha256 == hashlib.sha256(whole.read_bytes()).hexdigest()
    assert pq.read_table(target).equals(pq.read_table(whole))


def splice_rows_after(con, tmp_path: Path, before: Path, kept, keep: int, name: str):
    """Splice `keep` row groups of `before` (its footer `kept`) with the rest of rows_after."""
    last_kept = pq.read_table(before).slice(keep * ROWS_PER_GROUP - 1, 1).to_pylist()[0]
    tail = write(
        con,
        "rows_after",
        tmp_path / f"{name}.tail.parquet",
        f"where (occasion, alternative) > ('{last_kept['occasion']}', "
        f"'{last_kept['alternative']}')",
    )
    target = tmp_path / f"{name}.parquet"
    _sha256, bounds = write_spliced(
        before, kept, keep, file_sha256(before), tail, read_footer(tail), target
    )
    return target, bounds


def test_recorded_bounds_keep_the_entries_as_bytes_and_splice_the_same_file(con, tmp_path):
    before = write(con, "rows_before", tmp_path / "before.parquet")
    whole = write(con, "rows_after", tmp_path / "whole.parquet").read_bytes()
    first, bounds = splice_rows_after(con, tmp_path, before, read_footer(before), 5, "first")
    assert first.read_bytes() == whole
    # the bounds the splice wrote are where a whole reading finds each entry
    parsed = read_footer(first)
    assert parsed.group_bounds == bounds
    raw = read_footer(first, bounds)
    assert all(isinstance(group, RawStruct) for group in raw.row_groups)
    assert [encode_struct(group) for group in parsed.row_groups] == list(raw.row_groups)
    # a second splice keeps those entries as their bytes: still the whole write's bytes
    second, again = splice_rows_after(con, tmp_path, first, raw, 7, "second")
    assert second.read_bytes() == whole
    assert again == bounds


def test_bounds_that_do_not_fit_the_footer_read_it_whole(con, tmp_path):
    path = write(con, "rows_before", tmp_path / "before.parquet")
    whole = read_footer(path)
    for wrong in ([5, 9, 12], [whole.group_bounds[0] + 1, *whole.group_bounds[1:]]):
        footer = read_footer(path, wrong)
        assert footer.row_groups == whole.row_groups
        assert footer.group_bounds == whole.group_bounds


def test_a_recorded_bound_off_the_cut_is_refused(con, tmp_path):
    before = write(con, "rows_before", tmp_path / "before.parquet")
    bounds = list(read_footer(before).group_bounds)
    bounds[5] += 1  # where the sixth entry begins: the cut of a splice keeping five
    kept = read_footer(before, bounds)
    assert isinstance(kept.row_groups[0], RawStruct)  # they add up, so they are taken
    with pytest.raises(SpliceRefused, match="bounds do not fit"):
        splice_rows_after(con, tmp_path, before, kept, 5, "off")
    assert not (tmp_path / "off.parquet").exists()


def test_an_earlier_file_that_is_not_the_recorded_one_is_refused(con, tmp_path):
    before = write(con, "rows_before", tmp_path / "before.parquet")
    tail = write(con, "rows_after", tmp_path / "tail.parquet", "where i >= 1024")
    target = tmp_path / "spliced.parquet"
    with pytest.raises(SpliceRefused, match="sha256 differs"):
        write_spliced(before, read_footer(before), 1, "0" * 64, tail, read_footer(tail), target)
    assert not target.exists()


def test_row_groups_of_another_size_or_schema_are_refused(con, tmp_path):
    before = write(con, "rows_before", tmp_path / "before.parquet")
    other_size = tmp_path / "other_size.parquet"
    sql = f"select {COLUMNS} from rows_after order by occasion, alternative"  # noqa: S608
    write_query_parquet(con, sql, {}, other_size, 2048, {}, {}, KEYS)
    kept = read_footer(before)
    assert "configured size" in splice_refusal(kept, 2, read_footer(other_size), 2048)
    other_schema = tmp_path / "other_schema.parquet"
    sql = "select occasion, alternative from rows_after order by occasion, alternative"
    write_query_parquet(con, sql, {}, other_schema, ROWS_PER_GROUP, {}, {}, KEYS)
    refusal = splice_refusal(kept, 2, read_footer(other_schema), ROWS_PER_GROUP)
    assert refusal == "the earlier file's Parquet schema differs"


def test_a_file_that_is_not_parquet_is_refused(tmp_path):
    path = tmp_path / "not.parquet"
    path.write_bytes(b"PAR1" + b"x" * 40)
    with pytest.raises(SpliceRefused, match="does not end like a Parquet file"):
        read_footer(path)


@pytest.mark.parametrize(
    "first",
    [
        "2025-01-01:00000000",  # the first row: no row before it
        "2025-01-01:00000256",  # the first row of the second row group
        "2025-01-03:00001500",  # inside a row group
        "2025-01-11:00000000",  # after every row: the last, shorter row group is not counted
    ],
)
def test_row_groups_before_a_key_are_the_whole_groups_below_it(con, tmp_path, first):
    path = write(con, "rows_before", tmp_path / "sorted.parquet")
    # the reference: the rows below `first`, counted on the read-back file, in whole row groups
    occasions = pq.read_table(path, columns=["occasion"]).column("occasion").to_pylist()
    below = sum(occasion < first for occasion in occasions)
    assert row_groups_before(path, "occasion", first, ROWS_PER_GROUP) == below // ROWS_PER_GROUP


def test_row_groups_before_a_key_need_the_files_statistics(con, tmp_path):
    written = write(con, "rows_before", tmp_path / "sorted.parquet")
    bare = tmp_path / "no_statistics.parquet"
    pq.write_table(
        pq.read_table(written), bare, row_group_size=ROWS_PER_GROUP, write_statistics=False
    )
    assert row_groups_before(bare, "occasion", "2025-01-03:00001500", ROWS_PER_GROUP) is None
    assert row_groups_before(written, "no such column", "x", ROWS_PER_GROUP) is None
