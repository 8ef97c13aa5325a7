-- The card visits of one chooser bucket: one row per visit (store, visit_day, receipt) whose
-- chooser falls in bucket $bucket of $buckets. A visit has the choice build's identity
-- (sql/choices/030_choice_visits.sql): sale lines grouped by store, business day (with
-- $receipt_ids_unique_per = 'store_day') and receipt, its card the smallest non-empty one. The
-- bucket is the first 8 hex digits of the chooser pseudonym HMAC-SHA256(key, card), read as a
-- number, modulo $buckets: computed here from the key's RFC 2104 pads ($hmac_inner_pad,
-- $hmac_outer_pad), so no card leaves the warehouse and a chooser's bucket follows from its
-- published pseudonym alone. TEMP: it lives on the bucket's connection only, and holds no card.
create or replace temp table choice_bucket_visits as

with

sale_lines as (
    select
        cast(store as varchar) as store,
        cast(receipt as varchar) as receipt,
        case when $receipt_ids_unique_per = 'store_day' then sold_at::date end as visit_day,
        nullif(trim(cast(card as varchar)), '') as card,
    from partition_raw_lines
    where line_kind = 'sale'
),

visits as (
    select
        store,
        visit_day,
        receipt,
        min(card) as card,
    from sale_lines
    group by store, visit_day, receipt
    having min(card) is not null
),

cards as (
    select distinct card from visits
),

card_buckets as (
    select
        card,
        cast(
            ('0x' || left(sha256($hmac_outer_pad || unhex(sha256($hmac_inner_pad || encode(card)))), 8))
            as ubigint
        ) % $buckets as bucket,
    from cards
),

final as (
    select
        visits.store,
        visits.visit_day,
        visits.receipt,
    from visits
    join card_buckets using (card)
    where card_buckets.bucket = $bucket
)

select store, visit_day, receipt from final;
