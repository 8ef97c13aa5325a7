"""The partitioned build's choice stages, run per chooser bucket, against the one-process build.

The buckets run in this process here (tests/test_flows_partitioned.py runs them on a Dask
cluster). Each build of the sample is the slow part, so module fixtures build once per config
and the tests assert on what each build gave.
"""

from __future__ import annotations

import csv
import hashlib
import json
import shutil
from pathlib import Path

import polars as pl
import pytest
from test_partitioned_build import PARTITIONING, assert_same_tables, sample_copy

from demandprep.config import ProjectConfig, load_config
from demandprep.export.folder import latest_build, published_builds
from demandprep.partitioned.buckets import BucketOutputs, build_bucket, remove_stale_buckets
from demandprep.partitioned.plan import buckets_folder
from demandprep.partitioned.runner import build_partitioned, map_in_process
from demandprep.pipeline import BuildOutcome, run_build, run_ingest

CHOICE_FILES = ("choices.parquet", "choosers.parquet")
# the choice stages of the one-process build: a partitioned coordinator runs none of them
CHOICE_STAGE_NAMES = (
    "choice_inputs",
    "choice_occasions",
    "choice_history",
    "choice_sets",
)
SAMPLED = "sampled_alternatives = 2\n"


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def manifest(folder: Path) -> dict:
    return json.loads((folder / "manifest.json").read_text(encoding="utf-8"))


def with_buckets(config: ProjectConfig, buckets: int) -> ProjectConfig:
    """The copy's config with `partitioning.chooser_buckets` set."""
    path = config.config_path
    path.write_text(path.read_text(encoding="utf-8") + f"chooser_buckets = {buckets}\n", "utf-8")
    return load_config(path)


def with_sampling(config: ProjectConfig) -> ProjectConfig:
    """The copy's config drawing 2 alternatives besides the chosen one per occasion."""
    path = config.config_path
    text = path.read_text(encoding="utf-8")
    path.write_text(text.replace("[choices]\n", "[choices]\n" + SAMPLED), "utf-8")
    return load_config(path)


def recording_buckets(config: ProjectConfig, ran: list[BucketOutputs]):
    """The in-process bucket map, recording what each bucket returned."""

    def run(buckets, warehouses):
        outputs = [build_bucket(config, item, warehouses) for item in buckets]
        ran.extend(outputs)
        return outputs

    return run


def assert_same_choice_files(expected: Path, actual: Path) -> None:
    """The choice files are the one-process build's byte for byte, and so are their counts."""
    for name in CHOICE_FILES:
        assert sha256(expected / name) == sha256(actual / name), name
    assert manifest(actual)["facts"]["choices"] == manifest(expected)["facts"]["choices"]
    choice_warnings = [
        [text for text in manifest(folder)["warnings"] if text.startswith("choices:")]
        for folder in (expected, actual)
    ]
    assert choice_warnings[0] == choice_warnings[1]


@pytest.fixture(scope="module")
def one_bucket(coffee_sample: Path, tmp_path_factory: pytest.TempPathFactory):
    """The sample partitioned by region (three partitions) with a single chooser bucket."""
    folder = tmp_path_factory.mktemp("one_bucket")
    config = with_buckets(sample_copy(coffee_sample, folder / "sample", PARTITIONING), 1)
    ran: list[BucketOutputs] = []
    outcome = build_partitioned(
        config, map_in_process(config), map_buckets=recording_buckets(config, ran)
    )
    return config, outcome, ran


@pytest.fixture(scope="module")
def three_buckets(coffee_sample: Path, tmp_path_factory: pytest.TempPathFactory):
    """The sample partitioned by region with the default buckets (one per partition: three),
    then a forced night whose second bucket fails."""
    folder = tmp_path_factory.mktemp("three_buckets")
    config = sample_copy(coffee_sample, folder / "sample", PARTITIONING)
    # what a build with five buckets left behind (a bucket warehouse holds households' cards)
    stale = buckets_folder(config) / "bucket-2-of-5"
    stale.mkdir(parents=True)
    (stale / "demandprep.duckdb").write_bytes(b"an old bucket warehouse")
    ran: list[BucketOutputs] = []
    outcome = build_partitioned(
        config, map_in_process(config), map_buckets=recording_buckets(config, ran)
    )
    facts: dict = {
        "published_before": published_builds(config.export.root),
        "bucket_folders": sorted(path.name for path in buckets_folder(config).iterdir()),
    }

    def no_bucket_may_run(buckets, warehouses):
        raise AssertionError("a night without new files mapped chooser buckets")

    facts["no_new_files"] = build_partitioned(
        config, map_in_process(config), map_buckets=no_bucket_may_run
    )

    def second_bucket_fails(buckets, warehouses):
        build_bucket(config, buckets[0], warehouses)
        raise RuntimeError("bucket worker lost")

    try:
        build_partitioned(config, map_in_process(config), True, second_bucket_fails)
    except RuntimeError as error:
        facts["failed_bucket"] = error
    facts["published_after"] = published_builds(config.export.root)
    facts["latest_after"] = latest_build(config.export.root)
    facts["staging_after"] = list((config.export.root / ".staging").glob("*"))
    return config, outcome, ran, facts


def test_one_chooser_bucket_gives_the_single_process_choice_files_byte_for_byte(
    single_process_build: Path, one_bucket
) -> None:
    config, outcome, ran = one_bucket
    assert [item.bucket.label for item in ran] == ["1 of 1"]
    assert_same_choice_files(single_process_build, outcome.folder)


def test_three_chooser_buckets_give_the_single_process_tables_and_choice_files(
    single_process_build: Path, three_buckets
) -> None:
    config, outcome, ran, _ = three_buckets
    assert [item.bucket.label for item in ran] == ["1 of 3", "2 of 3", "3 of 3"]
    # every bucket built some choosers: the split is real
    assert all(item.rows["choosers"] > 0 for item in ran)
    assert_same_choice_files(single_process_build, outcome.folder)
    assert_same_tables(single_process_build, outcome.folder)


def test_each_chooser_sits_in_the_bucket_its_pseudonym_names(three_buckets) -> None:
    _, outcome, ran, _ = three_buckets
    seen: list[str] = []
    for item in ran:
        choosers = pl.read_parquet(item.files["choosers"])["chooser"].to_list()
        # bucket = first 8 hex digits of the pseudonym, as a number, modulo the buckets
        assert {int(chooser[:8], 16) % 3 for chooser in choosers} == {item.bucket.index}
        occasions = pl.read_parquet(item.files["choices"])["chooser"].unique().to_list()
        assert set(occasions) <= set(choosers)
        seen += choosers
    published = pl.read_parquet(outcome.folder / "choosers.parquet")["chooser"].to_list()
    assert sorted(seen) == published


def test_the_coordinator_runs_no_choice_stage_and_its_manifest_shows_the_buckets(
    three_buckets,
) -> None:
    _, outcome, ran, _ = three_buckets
    stages = manifest(outcome.folder)["timings_seconds"]
    assert "choice_buckets" in stages and "choices" in stages
    assert not set(CHOICE_STAGE_NAMES) & set(stages)
    assert manifest(outcome.folder)["facts"]["choice_buckets"] == [
        {
            "bucket": item.bucket.label,
            "choosers": item.rows["choosers"],
            "occasions": item.facts["occasions"],
            "rows": item.rows["choices"],
            "process": item.process,
        }
        for item in ran
    ]


def test_no_card_id_reaches_a_bucket_file(coffee_sample: Path, three_buckets) -> None:
    with (coffee_sample / "households.csv").open(encoding="utf-8", newline="") as households:
        cards = {row["loyalty_card"] for row in csv.DictReader(households)}
    _, _, ran, _ = three_buckets
    for item in ran:
        for path in item.files.values():
            frame = pl.read_parquet(path)
            text = {str(value) for column in frame.columns for value in frame[column].to_list()}
            assert not cards & text, path


def test_a_night_without_new_files_maps_no_chooser_bucket(three_buckets) -> None:
    _, outcome, _, facts = three_buckets
    kept: BuildOutcome = facts["no_new_files"]
    assert kept.skipped and kept.kept == outcome.folder


def test_a_failed_chooser_bucket_publishes_nothing_and_keeps_latest(three_buckets) -> None:
    _, outcome, _, facts = three_buckets
    assert str(facts["failed_bucket"]) == "bucket worker lost"
    assert facts["latest_after"] == outcome.folder
    assert facts["published_after"] == facts["published_before"]
    assert facts["staging_after"] == []


@pytest.fixture(scope="module")
def sampled_single_process(coffee_sample: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The sample with sampled alternatives, built by the one-process runner."""
    folder = tmp_path_factory.mktemp("sampled_single") / "sample"
    shutil.copytree(coffee_sample, folder, ignore=shutil.ignore_patterns("warehouse", "builds"))
    config = with_sampling(load_config(folder / "demandprep.toml"))
    run_ingest(config)
    build, _ = run_build(config)
    return build


def test_sampled_alternatives_are_drawn_as_in_one_process_across_two_buckets(
    coffee_sample: Path, sampled_single_process: Path, tmp_path: Path
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", PARTITIONING)
    config = with_buckets(with_sampling(config), 2)
    outcome = build_partitioned(config, map_in_process(config))
    # the draws really sampled: some occasions kept 3 of a larger set
    assert pl.read_parquet(outcome.folder / "choices.parquet")["sampled"].sum() > 0
    assert_same_choice_files(sampled_single_process, outcome.folder)


def test_a_build_removes_the_folders_of_buckets_of_another_count(three_buckets) -> None:
    _, _, _, facts = three_buckets
    expected = ["bucket-1-of-3", "bucket-2-of-3", "bucket-3-of-3", "inputs.duckdb"]
    assert facts["bucket_folders"] == expected


def test_only_bucket_folders_of_another_count_are_removed(
    coffee_sample: Path, tmp_path: Path
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", PARTITIONING)
    folder = buckets_folder(config)
    for name in ("bucket-1-of-2", "bucket-2-of-2", "bucket-1-of-3", "bucket-4-of-3", "notes"):
        (folder / name).mkdir(parents=True)
    (folder / "bucket-1-of-9").write_text("a file, not a bucket folder")
    (folder / "inputs.duckdb").write_text("the buckets' inputs")
    removed = remove_stale_buckets(config, 3)
    assert sorted(path.name for path in removed) == [
        "bucket-1-of-2",
        "bucket-2-of-2",
        "bucket-4-of-3",
    ]
    left = sorted(path.name for path in folder.iterdir())
    assert left == ["bucket-1-of-3", "bucket-1-of-9", "inputs.duckdb", "notes"]


def test_a_build_without_choices_removes_what_the_chooser_buckets_left(
    coffee_sample: Path, tmp_path: Path
) -> None:
    config = sample_copy(coffee_sample, tmp_path / "sample", PARTITIONING)
    path = config.config_path
    text = path.read_text(encoding="utf-8")
    choices_off = text.replace("[choices]\nenabled = true", "[choices]\nenabled = false")
    path.write_text(choices_off, "utf-8")
    config = load_config(path)
    assert not config.choices.enabled
    # what an earlier build with choices left: bucket warehouses and the inputs file both hold
    # a copy of the households table (card ids)
    folder = buckets_folder(config)
    for name in ("bucket-1-of-3", "bucket-2-of-3"):
        (folder / name).mkdir(parents=True)
        (folder / name / "demandprep.duckdb").write_bytes(b"an old bucket warehouse")
    (folder / "inputs.duckdb").write_bytes(b"the old buckets' inputs")
    (folder / "notes").mkdir()
    outcome = build_partitioned(config, map_in_process(config))
    assert not (outcome.folder / "choices.parquet").exists()
    assert sorted(item.name for item in folder.iterdir()) == ["notes"]
