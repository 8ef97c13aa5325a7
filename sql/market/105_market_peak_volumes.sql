-- Each geography's largest in-scope volume over all periods (equivalent units), which the
-- peak_multiple sizes multiply; read by 110 and compared with the stored sizes (106).
create or replace temp table market_peak_volumes as

with

period_volumes as (
    select
        geography,
        period_start,
        sum(equivalent_quantity order by product) as volume,
    from market_product_sales
    where equivalent_quantity > 0
    group by all
),

final as (
    select
        geography,
        max(volume) as peak_volume,
    from period_volumes
    group by geography
)

select
    geography,
    peak_volume,
from final
