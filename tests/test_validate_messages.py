"""Schema failures name the table, column and check; values of card-bearing tables are withheld;
the checks find on the engine they run on what polars' default engine finds."""

from __future__ import annotations

import contextlib

import pandera.polars as pa
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from demandprep.errors import UserError
from demandprep.validate import CHECK_ENGINE, validate_frame


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


class Sales(pa.DataFrameModel):
    store: str = pa.Field(isin=["S1", "S2"])
    units: int = pa.Field(ge=0)
    price: float = pa.Field(gt=0, nullable=True)

    @pa.dataframe_check
    @classmethod
    def revenue_below_cap(cls, data) -> pl.LazyFrame:
        return data.lazyframe.select(pl.col("units") * pl.col("price") < 1000)


BAD_SALES = pl.DataFrame(
    {
        "store": ["S1", "S9", "S2", "S1"],
        "units": [3, -1, 5, 400],
        "price": [2.5, 1.0, None, 4.0],
    }
)


def failure_cases(engine: str) -> pl.DataFrame:
    with pl.Config(engine_affinity=engine), pytest.raises(pa.errors.SchemaErrors) as caught:
        Sales.validate(BAD_SALES, lazy=True)
    return caught.value.failure_cases.sort(pl.all().cast(pl.String))


def test_the_engine_of_the_checks_finds_what_the_default_engine_finds() -> None:
    # validate_frame runs pandera on polars' in-memory engine (CHECK_ENGINE) for speed; the
    # reference is the same checks on polars' default engine
    assert_frame_equal(failure_cases(CHECK_ENGINE), failure_cases("auto"))
    with pytest.raises(UserError) as caught:
        validate_frame(BAD_SALES, Sales, "sales")
    message = caught.value.one_line()
    assert "isin" in message and "greater_than_or_equal_to" in message


@pytest.mark.parametrize("frame", [BAD_SALES, BAD_SALES.head(1)], ids=["failing", "passing"])
def test_validation_leaves_the_callers_polars_engine_as_it_was(frame: pl.DataFrame) -> None:
    with pl.Config(engine_affinity="streaming"):
        with contextlib.suppress(UserError):
            validate_frame(frame, Sales, "sales")
        assert pl.Config.state()["POLARS_ENGINE_AFFINITY"] == "streaming"
