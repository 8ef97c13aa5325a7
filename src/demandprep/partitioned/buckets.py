"""The chooser-bucket map step: the choice build of one bucket of choosers, on a worker.

A chooser's history (previous choice, loyalty, days since the last purchase) runs across stores,
so the choice build is split by chooser, not by geography: bucket b of N holds the choosers whose
pseudonym's first 8 hex digits, read as a number, are b modulo N (computed in the warehouse
from the card: `sql/partitioned/010`, no card leaves it). Each bucket opens a warehouse of its
own under `partitioning.root`, copies the coordinator's small input tables from the snapshot
the coordinator wrote after the market reduce (`choice_inputs.py`), attaches the partitions'
warehouses read-only and runs the choice stages unchanged (`CHOICE_STAGES`, the same SQL files):

- `choice_inputs` reads every partition's lines (`raw_lines` is then the union of them all), as
  the prices and choice sets are facts of every receipt of a store-day, card or not;
- from `choice_occasions` on, `raw_lines` holds only the lines of the bucket's card visits
  (`sql/partitioned/020`), so the visits, pseudonyms, histories, sets and the long table are
  the bucket's choosers' alone: a chooser's every visit is in one bucket, so each is exact.

It writes `choices` and `choosers` as Parquet, and the store-days it built sets for, which the
coordinator needs for the build's facts (a store-day's set serves the occasions of several
buckets). Nothing it writes holds a card: the pseudonym key reaches it through the worker's
environment, never as a task argument.
"""

from __future__ import annotations

import os
import re
import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb

from demandprep.choices.pseudonyms import occasion_hash_parameters, pseudonym_key
from demandprep.choices.scope import drop_choice_state
from demandprep.choices.stages import CHOICE_STAGES
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.partitioned.attached import partition_lines_view, warehouses_attached
from demandprep.partitioned.choice_inputs import choice_inputs_path, copy_choice_inputs
from demandprep.partitioned.map import write_query
from demandprep.partitioned.plan import buckets_folder, config_with_warehouse_in
from demandprep.sqlfiles import run_sql
from demandprep.stage import run_stage
from demandprep.warehouse import open_warehouse

# from this stage on, raw_lines holds the lines of the bucket's card visits only
FIRST_BUCKET_STAGE = "choice_occasions"
# the stage after which the store-days with sets exist (the last stage drops them)
STORE_DAYS_STAGE = "choice_sets"
# what a bucket writes, and the query that writes each (table names are ours)
BUCKET_FILES = {
    # unsorted: the coordinator sorts the union of the buckets' rows once
    "choices": "from choices",
    "choosers": "from choosers order by chooser",
    "choice_store_days": (
        "select store, day, snapshot_date is not null as shelf_set from choice_store_days "
        "order by store, day"
    ),
}
# the union of every partition's lines, under the bucket's own raw_lines view
PARTITION_LINES_VIEW = "partition_raw_lines"
# a bucket's folder name (ChooserBucket.name)
BUCKET_NAME = re.compile(r"^bucket-[0-9]+-of-[0-9]+$")


@dataclass(frozen=True)
class ChooserBucket:
    """Bucket `index` (0-based) of `count`: the choosers whose pseudonym falls in it."""

    index: int
    count: int

    @property
    def name(self) -> str:
        """The bucket's folder name under the buckets' folder."""
        return f"bucket-{self.index + 1}-of-{self.count}"

    @property
    def label(self) -> str:
        """The bucket as logs and the manifest show it."""
        return f"{self.index + 1} of {self.count}"


@dataclass(frozen=True)
class BucketOutputs:
    """What a finished bucket hands the coordinator: its files, their rows and its counts."""

    bucket: ChooserBucket
    files: dict[str, Path]
    rows: dict[str, int]
    # choice_facts of the bucket's own choosers (the coordinator adds them up)
    facts: dict[str, Any]
    # the warnings of the choice_inputs stage: the same in every bucket (whole inputs)
    input_warnings: list[str]
    # the process that ran it (a worker's, not the coordinator's), for the log and manifest
    process: int


def remove_stale_buckets(config: ProjectConfig, count: int) -> list[Path]:
    """Delete the folders of buckets that are not among `count` buckets; returns them.

    A bucket's warehouse holds a copy of the households table (card ids): when the bucket count
    changes, the old buckets' folders must not stay behind on the partitions' storage.
    """
    current = {ChooserBucket(index, count).name for index in range(count)}
    stale = [
        path
        for path in sorted(buckets_folder(config).glob("bucket-*-of-*"))
        if path.is_dir() and BUCKET_NAME.match(path.name) and path.name not in current
    ]
    for path in stale:
        shutil.rmtree(path)
    return stale


def remove_every_bucket(config: ProjectConfig) -> list[Path]:
    """Delete every bucket folder and the buckets' inputs file; returns what was removed.

    For a build without choices: what an earlier build with choices left there holds copies of
    the households table (card ids) that nothing reads any more.
    """
    removed = remove_stale_buckets(config, 0)
    inputs = choice_inputs_path(config)
    for path in (inputs, inputs.with_name(inputs.name + ".wal")):
        if path.exists():
            path.unlink()
            removed.append(path)
    return removed


def bucket_folder(config: ProjectConfig, bucket: ChooserBucket) -> Path:
    """The bucket's own folder: its warehouse and its output files."""
    return buckets_folder(config) / bucket.name


def bucket_config(config: ProjectConfig, bucket: ChooserBucket) -> ProjectConfig:
    """The project's config with the warehouse moved into the bucket's folder."""
    return config_with_warehouse_in(config, bucket_folder(config, bucket))


def build_bucket(
    config: ProjectConfig, bucket: ChooserBucket, warehouses: list[str]
) -> BucketOutputs:
    """Run the choice stages for the bucket's choosers over the partitions' lines; write them."""
    own = bucket_config(config, bucket)
    folder = own.warehouse.path.parent
    files = {name: folder / f"{name}.parquet" for name in BUCKET_FILES}
    rows: dict[str, int] = {}
    with open_warehouse(own.warehouse) as con:
        copy_choice_inputs(con, config)
        # a bucket rebuilds every occasion: its inputs hold no record of reference files, so
        # its state could not tell a changed households file (choices/scope.py)
        drop_choice_state(con)
        with (
            warehouses_attached(con, warehouses) as aliases,
            partition_lines_view(con, aliases, PARTITION_LINES_VIEW),
        ):
            con.execute(f"create or replace temp view raw_lines as from {PARTITION_LINES_VIEW}")
            ctx = BuildContext(con=con, config=own)
            input_warnings: list[str] = []
            for stage in CHOICE_STAGES:
                if stage.name == FIRST_BUCKET_STAGE:
                    input_warnings = list(ctx.warnings)
                    keep_bucket_lines(con, config, bucket)
                run_stage(stage, ctx)
                if stage.name == STORE_DAYS_STAGE:
                    rows["choice_store_days"] = write_query(
                        con, BUCKET_FILES["choice_store_days"], files["choice_store_days"]
                    )
            for name in ("choices", "choosers"):
                rows[name] = write_query(con, BUCKET_FILES[name], files[name])
            con.execute("drop view if exists temp.raw_lines")
    facts = ctx.facts["choices"]
    return BucketOutputs(bucket, files, rows, facts, input_warnings, os.getpid())


def keep_bucket_lines(
    con: duckdb.DuckDBPyConnection, config: ProjectConfig, bucket: ChooserBucket
) -> None:
    """From now on `raw_lines` on this connection holds the bucket's card visits' lines only."""
    key = pseudonym_key(config.choices.pseudonym_key_env)
    pads = occasion_hash_parameters(key)
    run_sql(
        con,
        "partitioned/010_choice_bucket_visits.sql",
        {
            "bucket": bucket.index,
            "buckets": bucket.count,
            "receipt_ids_unique_per": config.markets.receipt_ids_unique_per,
            "hmac_inner_pad": pads["hmac_inner_pad"],
            "hmac_outer_pad": pads["hmac_outer_pad"],
        },
    )
    run_sql(con, "partitioned/020_choice_bucket_lines.sql")
