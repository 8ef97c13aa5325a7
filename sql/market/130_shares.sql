-- The share table, long over assumptions: one row per assumption, market and inside product.
--   share              s_j = q_j / M                           (zero_shares 'drop' or 'keep')
--                      s_j = (q_j + 1) / (M + J + 1)           (zero_shares 'add_one')
--   outside_share      s_0 from the markets table, so s_0 + sum_j s_j = 1 in every market
--   log_share_ratio    ln s_j - ln s_0 (Berry 1994), null where s_j = 0
--   within_nest_share  s_j / sum of s_k over the market's products k of the same nest
-- The add-one rule follows Gandhi, Lu & Shi's Laplace-type correction as recalled from memory:
-- one unit added to every inside product and to the outside good.
create or replace table shares_slice as

with

products as (
    select * from market_products
    semi join market_slice_periods using (period_start)
),

markets as (
    select
        assumption,
        market,
        market_size,
        outside_share,
        product_count,
    from markets
    semi join market_slice_periods using (period_start)
),

attributes as (
    select * from market_product_attributes
),

product_shares as (
    select
        markets.assumption,
        products.market,
        products.geography,
        products.period_start,
        products.product,
        products.firm,
        products.nest,
        products.units,
        products.equivalent_quantity,
        products.net_revenue,
        products.price,
        products.gross_price,
        products.promo_share,
        case
            when $zero_shares = 'add_one'
                then (products.equivalent_quantity + 1)
                    / (markets.market_size + markets.product_count + 1)
            else products.equivalent_quantity / markets.market_size
        end as share,
        markets.outside_share,
        markets.market_size,
        products.is_fringe,
        products.is_zero_share,
    from products
    inner join markets using (market)
),

nest_totals as (
    select
        *,
        -- ordered frame: the total is the same whatever order the rows arrive in
        sum(share) over (
            partition by assumption, market, nest
            order by product
            rows between unbounded preceding and unbounded following
        ) as nest_share,
    from product_shares
),

shares_logged as (
    select
        *,
        case when share > 0 then ln(share) - ln(outside_share) end as log_share_ratio,
        case when nest is not null and nest_share > 0 then share / nest_share end
            as within_nest_share,
    from nest_totals
),

final as (
    select
        shares_logged.assumption,
        shares_logged.market,
        shares_logged.geography,
        shares_logged.period_start,
        shares_logged.product,
        shares_logged.firm,
        shares_logged.nest,
        attributes.* exclude (product, firm, nest),
        shares_logged.units,
        shares_logged.equivalent_quantity,
        shares_logged.net_revenue,
        shares_logged.price,
        shares_logged.gross_price,
        shares_logged.promo_share,
        shares_logged.share,
        shares_logged.outside_share,
        shares_logged.log_share_ratio,
        shares_logged.within_nest_share,
        case
            when shares_logged.within_nest_share > 0 then ln(shares_logged.within_nest_share)
        end as log_within_nest_share,
        shares_logged.market_size,
        shares_logged.is_fringe,
        shares_logged.is_zero_share,
    from shares_logged
    left join attributes using (product)
)

-- the characteristic columns vary with the config, hence the star
select * from final
