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


SHAPE_LIMIT = 40  # characters of a value's shape shown at most


def value_shape(text: str) -> str:
    """A value with each digit as 9 and each letter as a: its format without its content.

    Messages about card-bearing sources show this instead of the value ('12.50' -> '99.99',
    '03/05/2024' -> '99/99/9999'), so a wrong decimal mark or date format still shows.
    """
    shape = "".join("9" if c.isdigit() else "a" if c.isalpha() else c for c in text)
    return shape if len(shape) <= SHAPE_LIMIT else shape[:SHAPE_LIMIT] + "…"
