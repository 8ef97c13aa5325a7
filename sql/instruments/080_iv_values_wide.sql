-- One column per numeric instrument, named by iv_stored_values.instrument (names are built
-- only from fixed prefixes and checked config identifiers). Columns come out in name order.
create or replace table iv_values_wide as

with

instrument_rows as (
    select
        market,
        product,
        instrument,
        value,
    from iv_stored_values
)

pivot instrument_rows
on instrument
using first(value)
group by market, product
