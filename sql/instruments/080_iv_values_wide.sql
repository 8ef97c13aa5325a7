-- One column per numeric instrument, named by iv_stored_values.instrument (names are built
-- only from fixed prefixes and checked config identifiers). Columns come out in name order.
-- Only the periods the build assembles (`assembly_periods`, instruments/kept_assembly.py): a
-- column without a row in them is left out here and comes out null in `instruments`.
create or replace table iv_values_wide as

with

instrument_rows as (
    select
        market,
        product,
        instrument,
        value,
    from iv_stored_values
    semi join assembly_periods using (period_start)
)

pivot instrument_rows
on instrument
using first(value)
group by market, product
