"""Stata .dta copies of the Parquet files (format 118, Unicode), with the dictionary as labels.

pandas writes a .dta from a whole in-memory frame, so tables above `MAX_ROWS` are not converted;
the caller records a warning instead. The file's time stamp is fixed so the bytes are repeatable.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Mapping
from datetime import datetime
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from demandprep.export.csv_safe import list_as_text

MAX_ROWS = 5_000_000
STATA_VERSION = 118
LABEL_CHARS = 80
NAME_CHARS = 32  # Stata's longest variable name
STR_MAX = 2045
# Why fixed: the header's time stamp would otherwise make every rebuild differ.
FIXED_TIME_STAMP = datetime(2000, 1, 1)


def dta_fits(parquet_path: Path) -> bool:
    """Whether the table is small enough to convert in memory."""
    return pq.ParquetFile(parquet_path).metadata.num_rows <= MAX_ROWS


def write_dta(
    parquet_path: Path, dta_path: Path, labels: Mapping[str, str]
) -> tuple[int, dict[str, str]]:
    """Write `parquet_path` as a Stata file; column labels come from `labels`.

    Returns the rows and the columns renamed for Stata's 32-character names (original -> Stata
    name); a renamed column's label starts with its full name."""
    table = pq.read_table(parquet_path)
    renamed = stata_names(table.column_names)
    labels = {
        renamed.get(name, name): (f"{name}: {text}" if name in renamed else text)
        for name, text in labels.items()
    }
    table = table.rename_columns([renamed.get(name, name) for name in table.column_names])
    frame, convert_dates = _stata_frame(table)
    long_text = [
        name
        for name in frame.columns
        if frame[name].dtype == object and frame[name].str.len().max(skipna=True) > STR_MAX
    ]
    with dta_path.open("wb") as handle:
        frame.to_stata(
            handle,
            write_index=False,
            convert_dates=convert_dates,
            time_stamp=FIXED_TIME_STAMP,
            data_label=parquet_path.stem[:LABEL_CHARS],
            variable_labels={
                name: labels[name][:LABEL_CHARS] for name in frame.columns if name in labels
            },
            version=STATA_VERSION,
            convert_strl=long_text or None,
        )
        handle.flush()
        os.fsync(handle.fileno())
    return table.num_rows, renamed


def stata_names(names: list[str]) -> dict[str, str]:
    """Original -> Stata name for each name over NAME_CHARS: its start and 4 hex digits of its
    md5, so a long name gets the same Stata name in every table (a counter after it in the rare
    case that is taken too)."""
    taken = {name for name in names if len(name) <= NAME_CHARS}
    renamed: dict[str, str] = {}
    for name in names:
        if len(name) <= NAME_CHARS:
            continue
        digest = hashlib.md5(name.encode("utf-8"), usedforsecurity=False).hexdigest()[:4]
        candidate, number = f"{name[: NAME_CHARS - 5]}_{digest}", 0
        while candidate in taken:
            number += 1
            candidate = f"{name[: NAME_CHARS - 5 - len(str(number))]}{number}_{digest}"
        taken.add(candidate)
        renamed[name] = candidate
    return renamed


def _stata_frame(table: pa.Table) -> tuple[pd.DataFrame, dict[str, str]]:
    """A pandas frame Stata can store: booleans as 0/1 bytes, text nulls as empty strings."""
    convert_dates: dict[str, str] = {}
    columns: dict[str, pd.Series] = {}
    for item in table.schema:
        values = table.column(item.name)
        if pa.types.is_null(item.type):
            series = pd.Series(float("nan"), index=range(table.num_rows))
        elif pa.types.is_boolean(item.type):
            series = pd.Series(values.to_pandas(), dtype="Int8").astype("float64")
            if not series.isna().any():
                series = series.astype("int8")
        elif pa.types.is_date(item.type):
            series = pd.to_datetime(values.to_pandas())
            convert_dates[item.name] = "td"
        elif pa.types.is_timestamp(item.type):
            series = pd.to_datetime(values.to_pandas())
            convert_dates[item.name] = "tc"
        elif pa.types.is_string(item.type) or pa.types.is_large_string(item.type):
            series = pd.Series(values.to_pylist(), dtype=object).fillna("")
        elif pa.types.is_list(item.type):
            series = pd.Series(list_as_text(values).to_pylist(), dtype=object).fillna("")
        else:
            series = values.to_pandas()
        columns[item.name] = series
    return pd.DataFrame(columns), convert_dates
