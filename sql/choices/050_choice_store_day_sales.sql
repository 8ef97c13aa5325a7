-- What each alternative sold in each store and day (all receipts): median net unit price of the
-- sale lines and the share of those lines that carried a discount.
-- Only the days the recomputed occasions (056: all, or those from $rebuilt_from on) read: a
-- choice set looks back $set_window_days days (060), a last observed price $price_window_days
-- (070), so days before the earlier of the two bounds change no recomputed row.
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
        and (
            $every_occasion
            or day >= cast($rebuilt_from as date)
                - greatest($set_window_days, $price_window_days)
        )
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
