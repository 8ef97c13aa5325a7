-- What each alternative sold in each store and day (all receipts): median net unit price of the
-- sale lines and the share of those lines that carried a discount.
create or replace table choice_store_day_sales as

with

sale_lines as (
    select
        store,
        day,
        alternative,
        net_amount / quantity as unit_price,
        discounted,
    from choice_sales
    where line_kind = 'sale' and quantity > 0 and alternative is not null
),

final as (
    select
        store,
        day,
        alternative,
        count(*) as lines,
        median(unit_price) as unit_price,
        avg(cast(discounted as double)) as discount_share,
    from sale_lines
    group by store, day, alternative
)

select store, day, alternative, lines, unit_price, discount_share from final;
