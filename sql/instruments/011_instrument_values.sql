-- Every numeric instrument in long form; each family stage appends its rows, and the
-- instruments stage stores them per period (`iv_stored_values`) and pivots those into iv_
-- columns named by `instrument`. Rows carry their period so a build can replace one period.
create or replace table instrument_values (
    market varchar not null,
    product varchar not null,
    period_start date not null,
    instrument varchar not null,
    family varchar not null,
    source varchar,
    value double
)
