-- Other-market price (Hausman 1996): the mean price of the same product over the markets of
-- the same period outside the product-market's exclusion group (its own market, or its whole
-- region). Computed as (period total - group total) / (period count - group count), one pass
-- over the data instead of a market-by-market self-join; sums are ordered for determinism.
-- Markets where the product has no price (no sales) do not count. No other market -> null.
-- Only the periods in iv_build_periods: the means never reach across periods.
create or replace table iv_hausman as

with

priced as (
    select
        products.market,
        products.period_start,
        products.product,
        products.price,
        groups.exclusion_group,
    from iv_products as products
    inner join iv_market_groups as groups using (market)
    semi join iv_build_periods using (period_start)
),

period_totals as (
    select
        period_start,
        product,
        coalesce(sum(price order by market), 0) as price_sum,
        count(price) as priced_markets,
    from priced
    group by period_start, product
),

group_totals as (
    select
        period_start,
        exclusion_group,
        product,
        coalesce(sum(price order by market), 0) as price_sum,
        count(price) as priced_markets,
    from priced
    group by period_start, exclusion_group, product
),

other_markets as (
    select
        priced.market,
        priced.product,
        priced.period_start,
        period_totals.priced_markets - group_totals.priced_markets as other_market_count,
        period_totals.price_sum - group_totals.price_sum as other_price_sum,
    from priced
    inner join period_totals using (period_start, product)
    inner join group_totals using (period_start, exclusion_group, product)
),

final as (
    select
        market,
        product,
        period_start,
        other_market_count,
        case
            when other_market_count > 0 then other_price_sum / other_market_count
        end as hausman_price,
        other_market_count = 0 as hausman_missing,
    from other_markets
)

select
    market,
    product,
    period_start,
    other_market_count,
    hausman_price,
    hausman_missing,
from final
order by market, product
