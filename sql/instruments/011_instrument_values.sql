-- Every numeric instrument in long form; each family stage appends its rows, and the
-- instruments stage pivots them into iv_ columns named by `instrument`.
create or replace table instrument_values (
    market varchar not null,
    product varchar not null,
    instrument varchar not null,
    family varchar not null,
    source varchar,
    value double
)
