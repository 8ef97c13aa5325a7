-- The periods whose stored instrument rows an incremental build changes, found before its rows
-- are merged (instruments/periods.py): the periods computed again because their inputs
-- differ (iv_build_periods), the periods that left, and the periods where a row this build
-- made differs from the stored row of the same column and period, or a stored row of a column
-- and period this build made has no new twin. The families computed for every period (the cost
-- shifters, the near-rival counts when the spread moved) mostly give the stored values again.
-- A value's sign counts too: -0.0 and 0.0 are equal numbers, but not the same bits in a file
create or replace temp table iv_changed_periods as

with

fresh_value_columns as (
    select distinct instrument, period_start from instrument_values
),

replaced_values as (
    select * from iv_stored_values
    semi join fresh_value_columns using (instrument, period_start)
),

value_changes as (
    select coalesce(fresh.period_start, stored.period_start) as period_start
    from instrument_values as fresh
    full join replaced_values as stored using (instrument, market, product, period_start)
    where fresh.market is null
        or stored.market is null
        or fresh.value is distinct from stored.value
        or signbit(fresh.value) is distinct from signbit(stored.value)
),

fresh_flag_columns as (
    select distinct flag, period_start from instrument_flags
),

replaced_flags as (
    select * from iv_stored_flags
    semi join fresh_flag_columns using (flag, period_start)
),

flag_changes as (
    select coalesce(fresh.period_start, stored.period_start) as period_start
    from instrument_flags as fresh
    full join replaced_flags as stored using (flag, market, product, period_start)
    where fresh.market is null
        or stored.market is null
        or fresh.value is distinct from stored.value
),

stored_periods as (
    select distinct period_start from iv_stored_values
    union
    select distinct period_start from iv_stored_flags
)

select period_start from value_changes
union
select period_start from flag_changes
union
select period_start from iv_build_periods
union
select period_start from stored_periods
anti join iv_products using (period_start)
