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
