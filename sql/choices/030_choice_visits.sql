-- Store visits (receipts with at least one sale line) made with a loyalty card.
-- A visit has the market build's identity (sql/market/050_market_store_visits.sql): a receipt id
-- within the scope $receipt_ids_unique_per, so with store_day (the default: tills that restart
-- their numbers every day) it is store, business day (sold_at::date) and receipt. With 'chain' a
-- visit still belongs to one store here (an occasion happens in a store), so a chain-unique id
-- that shows up in two stores stays two visits.
-- The visit id is the visit's day (YYYY-MM-DD), ':' and the first 32 hex digits of
-- HMAC-SHA256(key, 'occasion' NUL store NUL [day NUL] receipt) (that day only with store_day),
-- computed from the key's RFC 2104 pads ($hmac_inner_pad, $hmac_outer_pad): stable across
-- rebuilds, and no link to the till's receipt without the key. The day comes first so that
-- ids sort by day: `choices`, stored in id order, then keeps each day's rows together after
-- the earlier days', and an incremental build replaces the rows from a day on (choices/scope.py).
-- The day is occasion_at's, which every choice row carries anyway.
-- Only the visits from $visits_from on (null: all), the days this build makes again
-- (028, choices/scope.py); 032 swaps the card for the chooser pseudonym, and the stage merges
-- them with the kept visits of earlier days into choice_visits.
create or replace table choice_scoped_visits as

with

sale_lines as (
    select
        cast(store as varchar) as store,
        cast(receipt as varchar) as receipt,
        sold_at,
        nullif(trim(cast(card as varchar)), '') as card,
    from raw_lines
    where line_kind = 'sale'
        and ($visits_from is null or sold_at >= $visits_from)
),

identified_lines as (
    select
        *,
        case when $receipt_ids_unique_per = 'store_day' then sold_at::date end as visit_day,
    from sale_lines
),

receipts as (
    select
        store,
        visit_day,
        receipt,
        min(sold_at) as occasion_at,
        -- a receipt scanned with two cards keeps the smaller id (counted in the facts); two
        -- cards differ in min and max, which costs less than counting distinct cards
        min(card) as card,
        coalesce(min(card) <> max(card), false) as several_cards,
    from identified_lines
    group by store, visit_day, receipt
),

final as (
    select
        strftime(cast(occasion_at as date), '%Y-%m-%d') || ':' || left(
            sha256(
                $hmac_outer_pad || unhex(sha256(
                    $hmac_inner_pad || $occasion_label
                    || encode(store) || unhex('00')
                    || coalesce(encode(strftime(visit_day, '%Y-%m-%d')) || unhex('00'), ''::blob)
                    || encode(receipt)
                ))
            ),
            32
        ) as visit,
        store,
        visit_day,
        receipt,
        occasion_at,
        cast(occasion_at as date) as day,
        card,
        several_cards,
    from receipts
    where card is not null
)

select visit, store, visit_day, receipt, occasion_at, day, card, several_cards from final;
