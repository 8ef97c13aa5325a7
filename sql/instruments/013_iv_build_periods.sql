-- The periods whose instruments this build computes, one row each: every period when
-- $every_period (no stored values, or the config, a reference file or the code changed), else
-- the periods whose inputs differ from the copy stored with the instrument values
-- (iv_stored_products, iv_stored_characteristics): a product-market that arrived or left, or a
-- firm, price or characteristic value that moved. Hausman means, characteristic sums, counts
-- and squared distances read only their own period, so stored values of other periods hold.
-- $keep_stored: the inputs of periods outside market_slice_periods are the stored copy (010,
-- 020), so only the periods in it are compared.
create or replace table iv_build_periods as

with

compared_periods as (
    select period_start from market_slice_periods
),

current_products as (
    select market, geography, period_start, product, firm, price,
    from iv_products
    where not $keep_stored or period_start in (select period_start from compared_periods)
),

stored_products as (
    select market, geography, period_start, product, firm, price,
    from iv_stored_products
    where not $keep_stored or period_start in (select period_start from compared_periods)
),

current_characteristics as (
    select market, product, period_start, firm, characteristic, value,
    from iv_characteristic_values
    where not $keep_stored or period_start in (select period_start from compared_periods)
),

stored_characteristics as (
    select market, product, period_start, firm, characteristic, value,
    from iv_stored_characteristics
    where not $keep_stored or period_start in (select period_start from compared_periods)
),

products_changed as (
    select period_start from (
        select * from current_products
        except
        select * from stored_products
    )
    union
    select period_start from (
        select * from stored_products
        except
        select * from current_products
    )
),

characteristics_changed as (
    select period_start from (
        select * from current_characteristics
        except
        select * from stored_characteristics
    )
    union
    select period_start from (
        select * from stored_characteristics
        except
        select * from current_characteristics
    )
),

current_periods as (
    select distinct period_start from current_products
),

final as (
    select period_start from current_periods
    where $every_period
        or period_start in (select period_start from products_changed)
        or period_start in (select period_start from characteristics_changed)
)

select
    period_start,
from final
order by period_start
