"""Batch size follows the memory limit: larger batches cost less per line, and memory allows."""

from __future__ import annotations

from pathlib import Path

import pytest

from demandprep.ingest.files import DiscoveredFile
from demandprep.ingest.runner import batch_bytes, batches

MIB = 2**20


@pytest.mark.parametrize(
    ("memory_limit", "expected"),
    [("4GB", 32 * MIB), ("2GB", 1_731_564_544 // 96), ("1GB", 16 * MIB), ("100MB", 16 * MIB)],
)
def test_batch_bytes_grow_with_duckdbs_budget_between_16_and_32_mib(
    memory_limit: str, expected: int
) -> None:
    # DuckDB's budget (the limit less the process reserve) / 96, kept within 16 to 32 MiB
    assert batch_bytes(memory_limit) == expected


def _file(name: str, size: int, source: str = "receipts") -> DiscoveredFile:
    return DiscoveredFile(source=source, path=Path(name), bytes=size, sha256=name, status="new")


def test_batches_close_at_the_byte_size_given() -> None:
    files = [_file(f"f{index}.csv", 10 * MIB) for index in range(7)]
    small = [len(batch) for batch in batches(files, 16 * MIB)]
    large = [len(batch) for batch in batches(files, 32 * MIB)]
    assert small == [1, 1, 1, 1, 1, 1, 1]
    assert large == [3, 3, 1]
