-- Category sale and void lines of every receipt (card or not), mapped to alternatives.
-- Net paid = amount - discount on every line; a void line cancels a sale line of its receipt.
-- $sales_from: the first day whose lines are read (null: every day); the lines of earlier days
-- are kept from the last build (choices/kept_sales.py), which merges these into choice_sales.
-- Compared on the sale time itself, so the scan skips the blocks of earlier days.
create or replace table choice_scoped_sales as

with

lines as (
    select
        cast(store as varchar) as store,
        cast(receipt as varchar) as receipt,
        sold_at,
        cast(sku as varchar) as sku,
        quantity,
        amount - discount as net_amount,
        discount,
        line_kind,
    from raw_lines
    where line_kind in ('sale', 'void')
        and ($sales_from is null or sold_at >= cast($sales_from as timestamp))
),

mapped as (
    select
        lines.store,
        lines.receipt,
        lines.sold_at,
        lines.sku,
        choice_alternative_map.product,
        choice_alternative_map.alternative,
        lines.quantity,
        lines.net_amount,
        lines.discount,
        lines.line_kind,
    from lines
    join choice_alternative_map using (sku)
),

final as (
    select
        store,
        receipt,
        sold_at,
        cast(sold_at as date) as day,
        sku,
        product,
        alternative,
        quantity,
        net_amount,
        discount <> 0 as discounted,
        line_kind,
    from mapped
)

select
    store,
    receipt,
    sold_at,
    day,
    sku,
    product,
    alternative,
    quantity,
    net_amount,
    discounted,
    line_kind,
from final;
