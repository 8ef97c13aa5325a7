-- Store visits (receipts with at least one sale line) made with a loyalty card.
create or replace table choice_visits as

with

sale_lines as (
    select
        cast(store as varchar) as store,
        cast(receipt as varchar) as receipt,
        sold_at,
        nullif(trim(cast(card as varchar)), '') as card,
    from raw_lines
    where line_kind = 'sale'
),

receipts as (
    select
        store,
        receipt,
        min(sold_at) as occasion_at,
        -- a receipt scanned with two cards keeps the smaller id (counted in the facts)
        min(card) as card,
        count(distinct card) as card_count,
    from sale_lines
    group by store, receipt
),

final as (
    select
        store || '/' || receipt as visit,
        store,
        receipt,
        occasion_at,
        cast(occasion_at as date) as day,
        card,
        card_count,
    from receipts
    where card is not null
)

select visit, store, receipt, occasion_at, day, card, card_count from final;
