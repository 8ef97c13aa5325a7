"""The report's small summaries of the warehouse, against numpy on the same values."""

from __future__ import annotations

import duckdb
import numpy as np

from demandprep.choices.report_counts import count_choice_days
from demandprep.export import report_data

# the columns of `choices` the report's counts read (choices/report_counts.py), in this order
CHOICE_COLUMNS = (
    "occasion varchar, alternative varchar, chosen boolean, holdout boolean, sampled boolean, "
    "choice_set_size bigint, loyalty double, burn_in boolean"
)
PLACES = ", ".join("?" * 8)


def test_loyalty_distribution_counts_rows_per_tenth_outside_the_burn_in():
    rng = np.random.default_rng(7)
    loyalty = np.concatenate([rng.random(500), [0.0, 0.1, 0.2999999, 0.9, 1.0, 1.0]])
    burn_in = rng.random(loyalty.size) < 0.3
    con = duckdb.connect()
    con.execute(f"create table choices ({CHOICE_COLUMNS})")
    rows = [
        (f"2024-01-{1 + n % 28:02d}:o{n}", "a", True, False, False, 1, float(value), bool(flag))
        for n, (value, flag) in enumerate(zip(loyalty, burn_in, strict=True))
    ]
    rows += [("2024-01-02:n1", "a", True, False, False, 1, None, False)]
    rows += [("2024-01-02:n2", "a", True, False, False, 1, None, True)]
    con.executemany(f"insert into choices values ({PLACES})", rows)
    count_choice_days(con, None)  # as the choice build keeps them
    found = report_data.loyalty_distribution(con)
    # numpy: the tenth each loyalty falls in, 1.0 counted in the last one
    tenths = np.minimum(np.floor(loyalty[~burn_in] * 10), 9).astype(int)
    assert found["low"].tolist() == [i / 10 for i in range(10)]
    assert found["rows"].tolist() == np.bincount(tenths, minlength=10).tolist()


def test_alternatives_per_occasion_counts_each_occasions_rows():
    # rows per occasion counted by grouping (the plain definition), on sampled and unsampled
    # occasions as the choice build writes them: one chosen row, set size on every row
    con = duckdb.connect()
    con.execute(f"create table choices ({CHOICE_COLUMNS})")
    rng = np.random.default_rng(11)
    rows = []
    for number in range(300):
        size = int(rng.integers(1, 9))
        sampled = size > 4 and rng.random() < 0.5
        shown = 4 if sampled else size
        chosen = int(rng.integers(0, shown))
        day = f"2024-02-{1 + number % 20:02d}"
        rows += [
            (f"{day}:o{number}", f"a{i}", i == chosen, False, sampled, size, None, True)
            for i in range(shown)
        ]
    con.executemany(f"insert into choices values ({PLACES})", rows)
    count_choice_days(con, None)  # as the choice build keeps them
    expected = con.sql(
        "select alternatives, count(*) as occasions from "
        "(select count(*) as alternatives from choices group by occasion) "
        "group by alternatives order by alternatives"
    ).fetchall()
    found = report_data.alternatives_per_occasion(con)
    assert list(found.itertuples(index=False, name=None)) == expected
    assert len(expected) > 4
