"""Columns the export adds to the warehouse tables it writes (for the data dictionary)."""

from __future__ import annotations

import pandera.polars as pa


class QuarantineExport(pa.DataFrameModel):
    """The exported quarantine's extra column: whether the raw line text was withheld."""

    original_text_withheld: bool = pa.Field(
        description=(
            "True when the quarantined line's original text is left out of the export because "
            "its source file maps a loyalty card column (the text stays in the warehouse)."
        ),
        metadata={
            "unit": "flag",
            "formula": "source is not among the config sources without a card column",
        },
    )
