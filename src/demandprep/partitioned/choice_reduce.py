"""The choice build of a partitioned build: a map by chooser bucket, then a small reduce.

Replaces the choice stages of the coordinator's stage list with three of its own:

- `choice_buckets`: writes the buckets' inputs (`choice_inputs.py`), hands the buckets to the
  map (`buckets.py`: Prefect tasks on the Dask cluster, or in this process) and waits for
  every one; a failed bucket raises here, so the build stops before the export;
- `choosers` and `choices`: load the buckets' files into the coordinator's warehouse, sorted by
  the tables' keys (chooser; occasion and alternative), validate them as the choice stages do,
  and add up the buckets' counts into `facts["choices"]`.

The published tables are the one-process build's: every id in them is a keyed hash of the
chooser's or the visit's own values (chooser, occasion, the holdout draw), the sampled
alternatives are drawn by md5(occasion, alternative), a chooser's history sees all of the
chooser's visits (each in one bucket), and the prices and sets read every partition's lines.
The only numbering in the choice SQL, `store_day_index` (055), stays inside a bucket.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import duckdb

from demandprep.choices.facts import warn_on_facts
from demandprep.choices.file_state import rows_changing
from demandprep.choices.pseudonyms import pseudonym_key
from demandprep.choices.report_counts import count_choice_days
from demandprep.choices.validation import validate_choices
from demandprep.config import ProjectConfig
from demandprep.context import BuildContext
from demandprep.partitioned.buckets import (
    BucketOutputs,
    ChooserBucket,
    build_bucket,
    remove_stale_buckets,
)
from demandprep.partitioned.choice_inputs import write_choice_inputs
from demandprep.schemas.choices import Choosers
from demandprep.stage import Stage
from demandprep.validate import validate_table
from demandprep.warehouse import insertion_order_kept

MapBuckets = Callable[[list[ChooserBucket], list[str]], list[BucketOutputs]]
# the choice build's counts of store-days, which several buckets share
STORE_DAY_FACTS = ("store_days_with_shelf_set", "store_days_with_sales_set")


def map_buckets_in_process(config: ProjectConfig) -> MapBuckets:
    """The bucket map run here, one bucket after another (no cluster)."""
    return lambda buckets, warehouses: [build_bucket(config, item, warehouses) for item in buckets]


def chooser_bucket_count(config: ProjectConfig, partitions: int) -> int:
    """`partitioning.chooser_buckets`, else one bucket per partition."""
    return config.partitioning.chooser_buckets or partitions


def choice_bucket_stages(
    config: ProjectConfig, map_buckets: MapBuckets, warehouses: list[str]
) -> tuple[Stage, ...]:
    """The stages that replace the choice stages on the coordinator."""
    count = chooser_bucket_count(config, len(warehouses))
    outputs: list[BucketOutputs] = []

    def map_stage(ctx: BuildContext) -> None:
        # the key first, as in the one-process build: no bucket starts without it
        pseudonym_key(config.choices.pseudonym_key_env)
        write_choice_inputs(ctx.con, config)
        buckets = [ChooserBucket(index, count) for index in range(count)]
        outputs[:] = sorted(map_buckets(buckets, warehouses), key=lambda item: item.bucket.index)
        remove_stale_buckets(config, count)
        for message in outputs[0].input_warnings:
            ctx.warn(message)
        ctx.facts["choice_buckets"] = bucket_facts(outputs)

    map_stage.__doc__ = "Run the choice stages per chooser bucket (map) and wait for all."

    def choosers_stage(ctx: BuildContext) -> None:
        load_bucket_table(ctx.con, "choosers", outputs, "chooser")
        validate_table(ctx.con, "choosers", Choosers)

    choosers_stage.__doc__ = "Load the buckets' choosers, sorted by chooser, and validate them."

    def choices_stage(ctx: BuildContext) -> None:
        rows_changing(ctx.con, None)  # every row is loaded again
        load_bucket_table(ctx.con, "choices", outputs, "occasion, alternative")
        validate_choices(ctx.con)
        count_choice_days(ctx.con, None)
        facts = combined_choice_facts(ctx.con, outputs)
        ctx.facts["choices"] = facts
        warn_on_facts(ctx, facts)

    choices_stage.__doc__ = "Load the buckets' choices in key order, validate and count them."

    return (
        Stage("choice_buckets", map_stage),
        Stage("choosers", choosers_stage),
        Stage("choices", choices_stage),
    )


def bucket_facts(outputs: list[BucketOutputs]) -> list[dict[str, Any]]:
    """What each bucket built and which process ran it, for the manifest."""
    return [
        {
            "bucket": item.bucket.label,
            "choosers": item.rows["choosers"],
            "occasions": item.facts["occasions"],
            "rows": item.rows["choices"],
            "process": item.process,
        }
        for item in outputs
    ]


def load_bucket_table(
    con: duckdb.DuckDBPyConnection, table: str, outputs: list[BucketOutputs], key: str
) -> None:
    """Replace `table` with the union of the buckets' files, stored in `key` order."""
    files = [str(item.files[table]) for item in outputs]
    # table and key are ours (the stages above), never config text; the paths are bound
    with insertion_order_kept(con):
        con.execute(
            f"create or replace table {table} as "  # noqa: S608
            f"from read_parquet($files) order by {key}",
            {"files": files},
        )


def combined_choice_facts(
    con: duckdb.DuckDBPyConnection, outputs: list[BucketOutputs]
) -> dict[str, Any]:
    """The buckets' choice facts as one build's: counts added up, store-days counted once."""
    first = outputs[0].facts
    facts: dict[str, Any] = {}
    for name, value in first.items():
        values = [item.facts[name] for item in outputs]
        if isinstance(value, dict):
            facts[name] = added_up(values, sort=name == "price_sources")
        elif isinstance(value, int) and not isinstance(value, bool):
            facts[name] = sum(values)
        else:
            facts[name] = value
    shelf, sales = con.execute(
        "select count(*) filter (where shelf_set), count(*) filter (where not shelf_set) "
        "from (select distinct store, day, shelf_set from read_parquet($files))",
        {"files": [str(item.files["choice_store_days"]) for item in outputs]},
    ).fetchone()
    facts.update(zip(STORE_DAY_FACTS, (shelf, sales), strict=True))
    return facts


def added_up(values: list[dict[str, Any]], sort: bool = False) -> dict[str, Any]:
    """Dicts of counts added key by key (text values, like a policy, kept as they are)."""
    keys = list(dict.fromkeys(key for value in values for key in value))
    total = {}
    for key in sorted(keys) if sort else keys:
        present = [value[key] for value in values if key in value]
        total[key] = sum(present) if isinstance(present[0], int) else present[0]
    return total
