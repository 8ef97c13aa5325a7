-- One boolean column per instrument flag (e.g. iv_hausman_missing), for the periods the build
-- assembles (`assembly_periods`).
create or replace table iv_flags_wide as

with

flag_rows as (
    select
        market,
        product,
        flag,
        value,
    from iv_stored_flags
    semi join assembly_periods using (period_start)
)

pivot flag_rows
on flag
using first(value)
group by market, product
