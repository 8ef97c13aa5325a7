"""The nightly deployment built from [schedule], the Prefect defaults, and the retry rule.

None of these need a Prefect server: a deployment object is built and inspected in process.
"""

from __future__ import annotations

import asyncio
import os
import tomllib
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pandera.errors
import pytest
from prefect.context import refresh_global_settings_context

from demandprep.config import ProjectConfig, parse_config
from demandprep.errors import UserError
from demandprep.flows.retry import InputRejected, is_read_error, raise_if_failed
from demandprep.flows.schedule import build_deployment, nightly_schedule
from demandprep.flows.settings import PREFECT_DEFAULTS, apply_prefect_defaults
from demandprep.ingest.results import FileResult

TEMPLATE = Path(__file__).resolve().parents[1] / "src" / "demandprep" / "templates" / "demo.toml"


def config_with_schedule(folder: Path, schedule: dict[str, Any]) -> ProjectConfig:
    """The demo config in `folder` (with empty stand-in input files) and this [schedule]."""
    raw = tomllib.loads(TEMPLATE.read_text(encoding="utf-8"))
    for source in raw["sources"].values():
        for pattern in source["files"]:
            stand_in = folder / pattern.replace("*", "2024", 1).replace("*", "2024-01-01")
            stand_in.parent.mkdir(parents=True, exist_ok=True)
            stand_in.touch()
    raw["schedule"] = schedule
    return parse_config(raw, folder / "demandprep.toml")


def test_deployment_has_the_configured_cron_timezone_and_name(tmp_path: Path) -> None:
    config = config_with_schedule(
        tmp_path,
        {"cron": "15 4 * * 1-5", "timezone": "Europe/Berlin", "deployment_name": "rebuild"},
    )
    deployment = build_deployment(config)
    [entry] = deployment.schedules
    assert (entry.schedule.cron, entry.schedule.timezone) == ("15 4 * * 1-5", "Europe/Berlin")
    assert deployment.name == "rebuild"
    assert deployment.entrypoint == "demandprep.flows.nightly.nightly_flow"


def test_a_partitioned_config_serves_the_partitioned_night(tmp_path: Path) -> None:
    config = config_with_schedule(tmp_path, {"parameters": {"force_rebuild": True}})
    partitioning = config.partitioning.model_copy(update={"by": "region"})
    deployment = build_deployment(config.model_copy(update={"partitioning": partitioning}))
    assert deployment.entrypoint == "demandprep.flows.partitioned.partitioned_night"
    assert deployment.parameters == {
        "config_path": str(tmp_path / "demandprep.toml"),
        "force_rebuild": True,
    }


def test_deployment_parameters_come_from_the_config(tmp_path: Path) -> None:
    config = config_with_schedule(tmp_path, {"parameters": {"force_rebuild": True}})
    deployment = build_deployment(config)
    assert deployment.parameters == {
        "config_path": str(tmp_path / "demandprep.toml"),
        "force_rebuild": True,
    }


def test_schedule_fires_at_local_time_across_a_clock_change(tmp_path: Path) -> None:
    from prefect.server.schemas.schedules import CronSchedule

    config = config_with_schedule(tmp_path, {"cron": "15 4 * * *", "timezone": "Europe/Berlin"})
    schedule = nightly_schedule(config)
    server_side = CronSchedule(cron=schedule.cron, timezone=schedule.timezone)
    start = datetime(2025, 3, 28, 12, 0, tzinfo=UTC)
    dates = asyncio.run(server_side.get_dates(n=3, start=start))
    # EU summer time starts on the last Sunday of March (2025-03-30 at 01:00 UTC): Berlin goes
    # from UTC+1 to UTC+2, so 04:15 local moves from 03:15 UTC to 02:15 UTC.
    assert [d.astimezone(UTC).strftime("%Y-%m-%d %H:%M") for d in dates] == [
        "2025-03-29 03:15",
        "2025-03-30 02:15",
        "2025-03-31 02:15",
    ]


def test_unknown_timezone_names_its_key(tmp_path: Path) -> None:
    config = config_with_schedule(tmp_path, {"timezone": "Atlantis/Capital"})
    with pytest.raises(UserError, match="schedule.timezone"):
        nightly_schedule(config)


def test_impossible_cron_names_its_key(tmp_path: Path) -> None:
    config = config_with_schedule(tmp_path, {"cron": "75 2 * * *"})
    with pytest.raises(UserError, match="schedule.cron"):
        nightly_schedule(config)


def test_unknown_flow_parameter_names_its_key(tmp_path: Path) -> None:
    config = config_with_schedule(tmp_path, {"parameters": {"skip_validation": True}})
    with pytest.raises(UserError, match="schedule.parameters.skip_validation"):
        build_deployment(config)


def test_mistyped_flow_parameter_is_a_user_error(tmp_path: Path) -> None:
    config = config_with_schedule(tmp_path, {"parameters": {"force_rebuild": "sometimes"}})
    with pytest.raises(UserError, match="schedule.parameters"):
        build_deployment(config)


def test_prefect_defaults_fill_gaps_but_keep_user_choices(monkeypatch: pytest.MonkeyPatch) -> None:
    for key in PREFECT_DEFAULTS:
        monkeypatch.delenv(key, raising=False)
    monkeypatch.setenv("PREFECT_SERVER_ANALYTICS_ENABLED", "true")
    try:
        added = apply_prefect_defaults()
        assert os.environ["PREFECT_SERVER_ANALYTICS_ENABLED"] == "true"
        assert "PREFECT_SERVER_ANALYTICS_ENABLED" not in added
        assert os.environ["PREFECT_CLOUD_ENABLE_ORCHESTRATION_TELEMETRY"] == "false"
    finally:
        # the call refreshed Prefect's process-wide settings: rebuild them from the real env
        monkeypatch.undo()
        refresh_global_settings_context()


def test_prefect_sees_telemetry_off_in_this_process() -> None:
    from prefect.settings import get_current_settings

    settings = get_current_settings()
    assert settings.server.analytics_enabled is False
    assert settings.cloud.enable_orchestration_telemetry is False
    assert settings.telemetry.enable_resource_metrics is False


@pytest.mark.parametrize(
    ("error", "retried"),
    [
        (FileNotFoundError("receipts_2024-01-09.csv.gz"), True),
        (EOFError("Compressed file ended before the end-of-stream marker was reached"), True),
        (UserError("stage output 'shares' breaks its schema"), False),
        (pandera.errors.SchemaError(None, None, "share must be in (0, 1)"), False),
        (ValueError("bug"), False),
    ],
)
def test_only_read_errors_are_retried(error: BaseException, retried: bool) -> None:
    assert is_read_error(error) is retried


@pytest.mark.parametrize("status", ["failed", "refused"])
def test_a_file_that_did_not_go_in_fails_its_ingest_task(status: str) -> None:
    # a refused file, like a failed one, must fail the night so `latest` stays as it was
    result = FileResult("receipts", Path("r.csv"), status, error="r.csv: refused: 240 of 240")
    with pytest.raises(InputRejected, match="r.csv: rejected by the ingest: r.csv: refused"):
        raise_if_failed(result)


@pytest.mark.parametrize("status", ["new", "replaced", "unchanged", "empty"])
def test_a_file_that_went_in_or_is_empty_passes_its_ingest_task(status: str) -> None:
    result = FileResult("receipts", Path("r.csv"), status)
    assert raise_if_failed(result) is result
