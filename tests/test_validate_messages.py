"""Schema failures name the table, column and check; values of card-bearing tables are withheld."""

from __future__ import annotations

import pandera.polars as pa
import polars as pl
import pytest

from demandprep.errors import UserError
from demandprep.validate import validate_frame


class Visits(pa.DataFrameModel):
    card: str = pa.Field(str_length={"min_value": 4})
    store: str = pa.Field(isin=["S1"])


class Prices(pa.DataFrameModel):
    store: str = pa.Field(isin=["S1"])


def test_a_failure_of_a_table_without_cards_shows_the_value() -> None:
    with pytest.raises(UserError) as caught:
        validate_frame(pl.DataFrame({"store": ["S9"]}), Prices, "prices")
    assert "(value 'S9')" in caught.value.one_line()


def test_a_failure_of_a_table_with_a_card_column_never_shows_a_value() -> None:
    # a shifted line can put a card id in any column of such a table
    frame = pl.DataFrame({"card": ["C7"], "store": ["CARD-6000123"]})
    with pytest.raises(UserError) as caught:
        validate_frame(frame, Visits, "visits")
    message = caught.value.one_line()
    assert "C7" not in message and "CARD-6000123" not in message
    assert "store: isin" in message and "value withheld" in message
