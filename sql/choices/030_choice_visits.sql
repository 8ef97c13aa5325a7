-- Store visits (receipts with at least one sale line) made with a loyalty card. The visit id is
-- HMAC-SHA256(key, 'occasion' NUL store NUL receipt), first 32 hex digits, computed from the
-- key's RFC 2104 pads ($hmac_inner_pad, $hmac_outer_pad): stable across rebuilds, and no link
-- to the till's receipt without the key. 032 swaps the card for the chooser pseudonym.
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
        left(
            sha256(
                $hmac_outer_pad || unhex(sha256(
                    $hmac_inner_pad || $occasion_label
                    || encode(store) || unhex('00') || encode(receipt)
                ))
            ),
            32
        ) as visit,
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
