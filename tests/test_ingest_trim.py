"""`ingest_trim` (sql/ingest/005) gives exactly what DuckDB's `trim` gives, at a lower cost, and
`ingest_line_trimmed` says a line needs no trim only when `trim` leaves every field of it alone.

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


DELIMITERS = (",", ";", "\t", "|", " ", "\u00a6")


def test_a_line_said_trimmed_has_no_field_that_trim_changes() -> None:
    con = macros()
    con.execute(
        "create table points as select chr(i::int) as ch from range(1, 1114112) t(i) "
        "where i < 55296 or i > 57343"
    )
    # each code point at the start and the end of the line's first, middle and last field
    lines = (
        "select d.delimiter, concat_ws(d.delimiter, ch || 'a', 'b' || ch || 'c', 'd' || ch) "
        "as line from points, (select unnest($delimiters) as delimiter) d "
        "union all select d.delimiter, "
        "concat_ws(d.delimiter, 'a' || ch, ch || 'b' || ch, ch || 'c', '') "
        "from points, (select unnest($delimiters) as delimiter) d"
    )
    wrong = con.execute(
        f"select count(*) from ({lines}) "  # noqa: S608 (no user text)
        "where ingest_line_trimmed(line, delimiter) and exists ("
        "select 1 from unnest(string_split(line, delimiter)) f(field) "
        "where trim(field) <> field)",
        {"delimiters": list(DELIMITERS)},
    ).fetchone()[0]
    assert wrong == 0


def test_a_plain_receipt_line_is_said_trimmed_and_a_padded_one_not() -> None:
    con = macros()
    got = con.execute(
        "select ingest_line_trimmed($plain, ','), ingest_line_trimmed($inner, ','), "
        "ingest_line_trimmed($padded, ','), ingest_line_trimmed($accented, ','), "
        "ingest_line_trimmed($leading, ','), ingest_line_trimmed($tabbed, '\t')",
        {
            "plain": "S01-1,1,S01,2024-01-01 07:17:57,G0077,1,1.12,,0.00,sale",
            "inner": "S01-1,1,S01,2024-01-01 07:17:57,G 77,1,1.12,,0.00,sale",
            "padded": "S01-1,1,S01 ,2024-01-01 07:17:57,G0077,1,1.12,,0.00,sale",
            "accented": "S01-1,1,S01,2024-01-01 07:17:57,Caf\u00e9,1,1.12,,0.00,sale",
            "leading": " S01-1,1,S01,2024-01-01 07:17:57,G0077,1,1.12,,0.00,sale",
            "tabbed": "S01-1\t1\tS01\t2024-01-01 07:17:57\t G0077\t1",
        },
    ).fetchone()
    assert got == (True, True, False, False, False, False)
