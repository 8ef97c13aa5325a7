"""The report's small summaries of the warehouse, against numpy on the same values."""

from __future__ import annotations

import duckdb
import numpy as np

from demandprep.export import report_data


def test_loyalty_distribution_counts_rows_per_tenth_outside_the_burn_in():
    rng = np.random.default_rng(7)
    loyalty = np.concatenate([rng.random(500), [0.0, 0.1, 0.2999999, 0.9, 1.0, 1.0]])
    burn_in = rng.random(loyalty.size) < 0.3
    con = duckdb.connect()
    con.execute("create table choices (loyalty double, burn_in boolean)")
    rows = [(float(value), bool(flag)) for value, flag in zip(loyalty, burn_in, strict=True)]
    con.executemany("insert into choices values (?, ?)", rows)
    con.execute("insert into choices values (null, false), (null, true)")
    found = report_data.loyalty_distribution(con)
    # numpy: the tenth each loyalty falls in, 1.0 counted in the last one
    tenths = np.minimum(np.floor(loyalty[~burn_in] * 10), 9).astype(int)
    assert found["low"].tolist() == [i / 10 for i in range(10)]
    assert found["rows"].tolist() == np.bincount(tenths, minlength=10).tolist()


def test_alternatives_per_occasion_counts_each_occasions_rows():
    # rows per occasion counted by grouping (the plain definition), on sampled and unsampled
    # occasions as the choice build writes them: one chosen row, set size on every row
    con = duckdb.connect()
    con.execute(
        "create table choices (occasion varchar, chosen boolean, choice_set_size bigint, "
        "sampled boolean)"
    )
    rng = np.random.default_rng(11)
    rows = []
    for number in range(300):
        size = int(rng.integers(1, 9))
        sampled = size > 4 and rng.random() < 0.5
        shown = 4 if sampled else size
        chosen = int(rng.integers(0, shown))
        rows += [(f"o{number}", i == chosen, size, sampled) for i in range(shown)]
    con.executemany("insert into choices values (?, ?, ?, ?)", rows)
    expected = con.sql(
        "select alternatives, count(*) as occasions from "
        "(select count(*) as alternatives from choices group by occasion) "
        "group by alternatives order by alternatives"
    ).fetchall()
    found = report_data.alternatives_per_occasion(con)
    assert list(found.itertuples(index=False, name=None)) == expected
    assert len(expected) > 4
