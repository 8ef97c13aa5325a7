-- accepted lines that repeat one already accepted: the same store, sale day, receipt and line
-- earlier in this batch (same file or an earlier file) or in raw_lines (an earlier run); a line
-- without a line number repeats when its receipt (store, day, receipt) was already accepted
-- from another file (files told apart by their position, the ordinal's high bits). The CTEs
-- read more than once are not materialized: a copy of every accepted line's key strings cost
-- more than scanning ingest_checked again
create temp table ingest_duplicates as
with

-- a partition's warehouse keeps only its stores' and days' lines (ingest_line_scope, one row,
-- written by partitioned/map.py; empty in one process): a line outside them has no earlier
-- copy to meet there, so its verdict is its own partition's, and it is never a duplicate here
line_scope as (
    select stores, first_day, after_last_day from ingest_line_scope
),

candidates as not materialized (
    select
        ordinal,
        ordinal >> 40 as position,
        store,
        sold_at::date as sale_day,
        receipt,
        line,
    from ingest_checked
    where reason is null
        and (
            not exists (from line_scope)
            or (
                list_contains((select stores from line_scope), store)
                and sold_at::date >= coalesce((select first_day from line_scope), sold_at::date)
                and sold_at::date
                    < coalesce((select after_last_day from line_scope), sold_at::date + 1)
            )
        )
),

-- only the days this batch covers: raw_lines is appended in time order, so this prunes
accepted_before as not materialized (
    select
        store,
        sold_at::date as sale_day,
        receipt,
        line,
    from raw_lines
    where sold_at >= $first_day and sold_at < $after_last_day
),

-- a cheap first pass on one hashed key; the exact rule then runs on the few keys it keeps
keyed as not materialized (
    select
        *,
        hash(store, sale_day, receipt, line) as key_hash,
    from candidates
    where line is not null
),

hashes_seen_twice as (
    select key_hash
    from keyed
    group by all
    having count(*) > 1
),

repeated_in_batch as (
    select ordinal
    from keyed
    semi join hashes_seen_twice using (key_hash)
    qualify row_number() over (
        partition by store, sale_day, receipt, line order by ordinal
    ) > 1
),

receipt_in_earlier_file as (
    select
        ordinal,
        row_number() over (
            partition by store, sale_day, receipt order by ordinal
        ) as copy,
        first_value(position) over (
            partition by store, sale_day, receipt order by ordinal
        ) as first_position,
        position,
    from candidates
    where line is null
),

-- against the lines stored before, likewise: the one hashed key first (a probe of every
-- accepted line on four columns cost more than the rest of this file), the exact key after
hashes_stored_before as (
    select distinct hash(store, sale_day, receipt, line) as key_hash
    from accepted_before
    where line is not null
),

hash_stored_before as (
    select *
    from keyed
    semi join hashes_stored_before using (key_hash)
),

line_in_earlier_run as (
    select hash_stored_before.ordinal
    from hash_stored_before
    semi join accepted_before
        on accepted_before.store = hash_stored_before.store
        and accepted_before.sale_day = hash_stored_before.sale_day
        and accepted_before.receipt = hash_stored_before.receipt
        and accepted_before.line = hash_stored_before.line
),

receipt_in_earlier_run as (
    select candidates.ordinal
    from candidates
    semi join accepted_before
        on accepted_before.store = candidates.store
        and accepted_before.sale_day = candidates.sale_day
        and accepted_before.receipt = candidates.receipt
    where candidates.line is null
),

final as (
    select ordinal from repeated_in_batch
    union
    select ordinal from receipt_in_earlier_file where position <> first_position
    union
    select ordinal from line_in_earlier_run
    union
    select ordinal from receipt_in_earlier_run
)

select ordinal from final
