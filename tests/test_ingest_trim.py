"""`ingest_trim` (sql/ingest/005) gives exactly what DuckDB's `trim` gives, at a lower cost.

reference: DuckDB's own `trim(text)`; every Unicode code point is tried at the start, at the end
and alone, beside the cases a receipt field meets (spaces inside, runs of spaces, empty, NULL).
"""

from __future__ import annotations

import duckdb

from demandprep.sqlfiles import run_sql


def macros() -> duckdb.DuckDBPyConnection:
    con = duckdb.connect()
    run_sql(con, "ingest/005_ingest_macros.sql")
    return con


def test_ingest_trim_equals_trim_for_every_code_point_at_either_end() -> None:
    con = macros()
    # every code point but the surrogates, which are no text
    con.execute(
        "create table points as select chr(i::int) as ch from range(1, 1114112) t(i) "
        "where i < 55296 or i > 57343"
    )
    differing = con.execute(
        "select count(*) from points, (values ('x'), ('a b'), ('')) words(word) "
        "where ingest_trim(ch || word) is distinct from trim(ch || word) "
        "or ingest_trim(word || ch) is distinct from trim(word || ch) "
        "or ingest_trim(ch || word || ch) is distinct from trim(ch || word || ch)"
    ).fetchone()[0]
    assert differing == 0


def test_ingest_trim_keeps_inner_spaces_and_nulls() -> None:
    con = macros()
    cases = [None, "", " ", "   ", " a ", "a  b", "\u00a0é\u3000", "K12 ", "\tK12\t"]
    got = con.execute(
        "select list(ingest_trim(x) is not distinct from trim(x) order by n) "
        "from (select unnest($cases) as x, unnest(range(len($cases))) as n)",
        {"cases": cases},
    ).fetchone()[0]
    assert got == [True] * len(cases)
