-- Median net unit price paid per region, market period and alternative (all receipts).
-- Only the periods of the recomputed occasions (056: all, or those from $rebuilt_from on, the
-- first day of a period): an occasion's prices read its own period only (070).
create or replace table choice_region_period_prices as

with

sale_lines as (
    select
        choice_store_regions.region,
        choice_calendar.period_start,
        choice_sales.alternative,
        choice_sales.net_amount / choice_sales.quantity as unit_price,
        choice_sales.discounted,
    from choice_sales
    join choice_calendar using (day)
    join choice_store_regions using (store)
    where choice_sales.line_kind = 'sale'
        and choice_sales.quantity > 0
        and choice_sales.alternative is not null
        and ($every_occasion or choice_calendar.period_start >= $rebuilt_from)
),

final as (
    select
        region,
        period_start,
        alternative,
        median(unit_price) as unit_price,
        avg(cast(discounted as double)) as discount_share,
    from sale_lines
    group by region, period_start, alternative
)

select region, period_start, alternative, unit_price, discount_share from final;
