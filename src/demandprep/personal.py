"""What counts as personal in the inputs: the columns that carry loyalty-card ids.

A source with such a column is card-bearing: a malformed line can shift a card id into any of
its fields, so no message, log or export quotes a value of it (file contents included).
"""

from __future__ import annotations

from collections.abc import Iterable

CARD_COLUMNS = ("card",)


def carries_cards(our_columns: Iterable[str]) -> bool:
    """True when a source's mapped columns (our names) include a card column."""
    return any(column in CARD_COLUMNS for column in our_columns)
