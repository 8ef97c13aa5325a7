"""Reading a batch's files in threads: every file's lines in file order, numbered per file, with
bounded read-ahead, and the same warehouse as reading them one by one."""

from __future__ import annotations

import gzip
import hashlib
import threading
import time
from pathlib import Path

import pytest
from ingest_fixtures import copy_faults

from demandprep.config import load_config
from demandprep.ingest import lines as lines_module
from demandprep.ingest import reader as reader_module
from demandprep.ingest.files import discover_source
from demandprep.ingest.lines import LinesUnreadable, batch_line_chunks, line_chunks
from demandprep.ingest.runner import ingest_all
from demandprep.warehouse import open_warehouse


def write_files(folder: Path) -> list[Path]:
    """Files of unlike sizes and kinds: plain, gzip, empty, without a final LF, CRLF."""
    folder.mkdir(parents=True, exist_ok=True)
    contents = {
        "a.csv": b"h\n" + b"".join(b"a%d\n" % n for n in range(500)),
        "b.csv.gz": gzip.compress(b"h\n" + b"".join(b"bb%d\n" % n for n in range(2000))),
        "c.csv": b"",
        "d.csv": b"h\nd1\nd2",
        "e.csv": b"h\r\n" + b"".join(b"e%d\r\n" % n for n in range(300)),
        "f.csv.gz": gzip.compress(b"h\n" + b"".join(b"f%d\n" % n for n in range(50))),
    }
    paths = []
    for name, data in contents.items():
        path = folder / name
        path.write_bytes(data)
        paths.append(path)
    return paths


def serial_lines(paths: list[Path]) -> list[tuple[int, int, str]]:
    """(position, line number, text) of each file read alone, one after the other."""
    found = []
    for position, path in enumerate(paths):
        if path.stat().st_size == 0:
            continue
        for chunk in line_chunks(path, "utf-8"):
            numbers, texts = chunk["line_no"].to_pylist(), chunk["text"].to_pylist()
            found += [(position, number, text) for number, text in zip(numbers, texts, strict=True)]
    return found


def batch_lines(paths: list[Path], workers: int) -> list[tuple[int, int, str]]:
    found = []
    for position, chunk in batch_line_chunks(paths, "utf-8", workers):
        numbers, texts = chunk["line_no"].to_pylist(), chunk["text"].to_pylist()
        found += [(position, number, text) for number, text in zip(numbers, texts, strict=True)]
    return found


@pytest.mark.parametrize("workers", [1, 2, 4])
def test_files_read_in_threads_keep_file_order_and_line_numbers(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, workers: int
) -> None:
    monkeypatch.setattr(lines_module, "CHUNK_BYTES", 97)  # many chunks per file
    paths = write_files(tmp_path)
    expected = serial_lines(paths)
    assert batch_lines(paths, workers) == expected
    # numbered per file from 1 (the header), without gaps, in file order
    for position in (0, 1, 3, 4, 5):
        numbers = [number for at, number, _ in expected if at == position]
        assert numbers == list(range(1, len(numbers) + 1))
    assert [at for at, _, _ in expected] == sorted(at for at, _, _ in expected)


def test_an_unreadable_file_stops_the_read_after_the_files_before_it(tmp_path: Path) -> None:
    paths = write_files(tmp_path)
    broken = tmp_path / "broken.csv.gz"
    broken.write_bytes(b"\x1f\x8b not gzip at all")
    paths.insert(2, broken)
    before = threading.active_count()
    found: list[int] = []
    with pytest.raises(LinesUnreadable) as raised:
        for position, chunk in batch_line_chunks(paths, "utf-8", 3):
            found += [position] * chunk.num_rows
    assert raised.value.path == broken
    assert set(found) == {0, 1}
    assert found.count(1) == 2001  # file b whole, then the error
    assert threading.active_count() == before  # no reader thread left behind


def test_read_ahead_is_bounded_while_the_consumer_waits(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(lines_module, "CHUNK_BYTES", 64)
    produced = []
    real = lines_module.line_chunks

    def counted(path: Path, encoding: str):
        for chunk in real(path, encoding):
            produced.append(chunk.num_rows)
            yield chunk

    monkeypatch.setattr(lines_module, "line_chunks", counted)
    folder = tmp_path / "big"
    folder.mkdir()
    paths = []
    for number in range(6):
        path = folder / f"big{number}.csv"
        path.write_bytes(b"".join(b"line %06d\n" % n for n in range(2000)))
        paths.append(path)
    reader = batch_line_chunks(paths, "utf-8", 3)
    next(reader)
    time.sleep(0.3)  # let the readers run ahead as far as they may (no timing is asserted)
    ahead = len(produced) - 1
    # each of the 3 reader threads holds at most its queue and the chunk it is putting
    bound = 3 * (lines_module.QUEUED_CHUNKS + 1)
    assert 0 < ahead <= bound
    reader.close()


def warehouse_tables(config_path: Path, threads: int) -> dict[str, list]:
    text = config_path.read_text().replace("threads = 2", f"threads = {threads}")
    config_path.write_text(text)
    config = load_config(config_path)
    with open_warehouse(config.warehouse) as con:
        summary = ingest_all(con, config)
        assert summary.ok
        return {
            table: con.execute(f"select * from {table} order by all").fetchall()  # noqa: S608
            for table in ("raw_lines", "quarantine", "ledger_reasons")
        } | {
            "ledger": con.execute(
                "select * exclude (ingested_at) from ledger order by all"
            ).fetchall()
        }


def test_threaded_read_fills_the_warehouse_as_the_serial_read(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(lines_module, "CHUNK_BYTES", 211)  # lines cut across chunks
    monkeypatch.setattr(reader_module, "HANDOFF_BYTES", 500)  # many inserts per batch
    serial = warehouse_tables(copy_faults(tmp_path / "one"), threads=1)
    threaded = warehouse_tables(copy_faults(tmp_path / "four"), threads=4)
    assert serial["raw_lines"]
    assert serial["quarantine"]
    # the same rows, paths apart (each copy has its own folder)
    one, four = str(tmp_path / "one"), str(tmp_path / "four")
    assert repr(threaded).replace(four, one) == repr(serial)


def test_lines_split_in_many_pieces_fill_the_warehouse_as_in_one(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    whole = warehouse_tables(copy_faults(tmp_path / "one"), threads=2)
    monkeypatch.setattr(reader_module, "HANDOFF_BYTES", 500)  # 010 runs once per few lines
    pieces = warehouse_tables(copy_faults(tmp_path / "many"), threads=2)
    assert whole["raw_lines"]
    assert whole["quarantine"]
    one, many = str(tmp_path / "one"), str(tmp_path / "many")
    assert repr(pieces).replace(many, one) == repr(whole)


def test_checksums_taken_in_threads_match_hashlib_in_file_order(tmp_path: Path) -> None:
    paths = write_files(tmp_path)
    found = discover_source("receipts", paths, {}, workers=3)
    assert [item.path for item in found] == paths
    # reference: hashlib.sha256 of each file's bytes
    assert [item.sha256 for item in found] == [
        hashlib.sha256(path.read_bytes()).hexdigest() for path in paths
    ]
    assert [item.bytes for item in found] == [path.stat().st_size for path in paths]


@pytest.mark.parametrize("chunk_bytes", [1, 2, 3, 7, 64, 1 << 20])
def test_lines_cut_at_any_chunk_size_are_the_lines_bytes_split_finds(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, chunk_bytes: int
) -> None:
    monkeypatch.setattr(lines_module, "CHUNK_BYTES", chunk_bytes)
    data = b"h,x\n\n1,a\r\n22,bb\n\n\n333,ccc\n4444,dddd"
    path = tmp_path / "lines.csv"
    path.write_bytes(data)
    chunks = list(line_chunks(path, "utf-8"))
    texts = [text for chunk in chunks for text in chunk["text"].to_pylist()]
    lengths = [length for chunk in chunks for length in chunk["length"].to_pylist()]
    numbers = [number for chunk in chunks for number in chunk["line_no"].to_pylist()]
    # reference: bytes.split at LF (the cutter may leave each line's LF on, the reader drops it)
    expected = data.split(b"\n")
    assert [text.removesuffix("\n") for text in texts] == [line.decode() for line in expected]
    assert lengths == [len(line) for line in expected]
    assert numbers == list(range(1, len(expected) + 1))


@pytest.mark.parametrize("chunk_bytes", [1, 2, 3, 7, 64, 1 << 20])
def test_line_texts_come_without_their_lf_and_with_their_delimiters_counted(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, chunk_bytes: int
) -> None:
    monkeypatch.setattr(lines_module, "CHUNK_BYTES", chunk_bytes)
    data = (
        b"h;x;y\n\n1;a\r\n22;bb;;\n;\n\r\r\n333;ccc;short;a much longer field here\n"
        b"\xc3\xa9;\xe2\x82\xac;x\n4444;dddd\r"
    )
    path = tmp_path / "lines.csv"
    path.write_bytes(data)
    chunks = list(line_chunks(path, "utf-8", ";"))
    texts = [text for chunk in chunks for text in chunk["text"].to_pylist()]
    counts = [count for chunk in chunks for count in chunk["delimiters"].to_pylist()]
    # reference: bytes.split at LF and bytes.count (the CR of CRLF is 010's to drop, not ours)
    expected = data.split(b"\n")
    assert texts == [line.decode() for line in expected]
    assert counts == [line.count(b";") for line in expected]


@pytest.mark.parametrize("delimiter", ["\r", "\u00a6", None])
def test_delimiters_are_left_uncounted_when_a_byte_count_could_be_wrong(
    tmp_path: Path, delimiter: str | None
) -> None:
    # a CR may be the CRLF terminator 010 drops; a non-ASCII delimiter is several bytes
    path = tmp_path / "lines.csv"
    path.write_bytes("a\r\u00a6b\r\n".encode())
    (chunk,) = line_chunks(path, "utf-8", delimiter)
    assert chunk["delimiters"].to_pylist() == [None]
    assert chunk["text"].to_pylist() == ["a\r\u00a6b\r"]


def test_invalid_utf8_lines_keep_their_bytes_as_raw(tmp_path: Path) -> None:
    path = tmp_path / "lines.csv"
    path.write_bytes(b"a;b\n\xff;c\n")
    (chunk,) = line_chunks(path, "utf-8", ";")
    assert chunk["text"].to_pylist() == [None, None]
    assert chunk["raw"].to_pylist() == [b"a;b\n", b"\xff;c\n"]
    assert chunk["delimiters"].to_pylist() == [1, 1]


@pytest.mark.parametrize("chunk_bytes", [1, 5, 64, 1 << 20])
def test_lines_told_plain_have_no_field_that_trim_changes(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, chunk_bytes: int
) -> None:
    monkeypatch.setattr(lines_module, "CHUNK_BYTES", chunk_bytes)
    lines = [
        b"T1;1;S1;2024-03-05 10:00:00;K1",  # a space inside a field only: plain
        b"T2;;S1;;",
        b" T3;1",
        b"T4 ;1",
        b"T5; 1",
        b"T6;1 ",
        b"T7;1 \r",
        b"T8;\xc3\xa9",
        b"T9;a b;c",
        b" ",
        b"",
        b"T10;1",  # the last line, without its LF
    ]
    path = tmp_path / "lines.csv"
    path.write_bytes(b"\n".join(lines))
    chunks = list(line_chunks(path, "utf-8", ";"))
    plain = [flag for chunk in chunks for flag in chunk["plain"].to_pylist()]
    # reference: Python's str.strip(" "), the one ASCII character DuckDB's trim removes
    trimmed = [
        line.isascii() and all(f == f.strip(b" ") for f in line.rstrip(b"\r").split(b";"))
        for line in lines
    ]
    assert plain == [True, True, False, False, False, False, False, False, True, False, True, True]
    assert all(trimmed[i] for i, flag in enumerate(plain) if flag)
