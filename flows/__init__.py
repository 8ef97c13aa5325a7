"""Prefect flows: the nightly rebuild (`nightly`), its schedule and serving (`schedule`)."""

from demandprep.flows.settings import apply_prefect_defaults

# The one deliberate import-time effect: Prefect reads its settings when first imported, and every
# module here imports it, so telemetry and network defaults must be in place before that.
apply_prefect_defaults()
