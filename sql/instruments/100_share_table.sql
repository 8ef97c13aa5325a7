-- What export writes per assumption: every shares row with its instruments, for the periods
-- the build assembles (`assembly_periods`; merged into `share_table`,
-- instruments/kept_assembly.py). Fringe rows and zero-share rows without an instruments row
-- keep null iv_ columns.
create or replace table share_table_slice as

with

share_rows as (
    select * from shares
    semi join assembly_periods using (period_start)
),

instrument_rows as (
    select * from instruments
),

final as (
    select
        share_rows.*,
        instrument_rows.* exclude (market, product),
    from share_rows
    left join instrument_rows using (market, product)
)

select * from final
order by assumption, market, product
