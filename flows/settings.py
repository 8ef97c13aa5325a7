"""Prefect defaults for demandprep: no telemetry, no network, unless the user asks for them.

Prefect reads its settings from the environment when it is imported, so the defaults are put in
the environment (never overriding a value the user set) before `prefect` is imported.
"""

from __future__ import annotations

import os
import sys

# Each entry turns off something that would call out of the machine or collect usage data.
PREFECT_DEFAULTS: dict[str, str] = {
    # the server sends anonymous usage data on start-up
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    # the client's own usage events (the standard opt-out Prefect honours)
    "DO_NOT_TRACK": "1",
    # OpenTelemetry spans and resource metrics, sent to Prefect Cloud when connected to it
    "PREFECT_CLOUD_ENABLE_ORCHESTRATION_TELEMETRY": "false",
    "PREFECT_TELEMETRY_ENABLE_RESOURCE_METRICS": "false",
    # the UI fetches promotional content and the integrations catalogue from the internet
    "PREFECT_SERVER_UI_SHOW_PROMOTIONAL_CONTENT": "false",
    # not about the network: on a busy 2-core machine the temporary server can take over the
    # default 20 s to start, which would fail a run before it begins
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "90",
}


def apply_prefect_defaults() -> dict[str, str]:
    """Put the defaults in the environment where unset; returns the ones this call added."""
    added = {key: value for key, value in PREFECT_DEFAULTS.items() if key not in os.environ}
    os.environ.update(added)
    if added and "prefect.context" in sys.modules:
        # prefect was imported before us: make its process-wide settings see the new values
        from prefect.context import refresh_global_settings_context

        refresh_global_settings_context()
    return added
