-- raw_lines as the choice build's visit steps see it in one chooser bucket: the lines of the
-- bucket's card visits (010), read from the partitions' lines in place (TEMP view, nothing is
-- copied). A line belongs to a visit by the visit's identity: store, receipt and, when it has
-- one, business day.
create or replace temp view raw_lines as

with

lines as (
    select * from partition_raw_lines
),

bucket_visits as (
    select store, visit_day, receipt from choice_bucket_visits
),

final as (
    select lines.*
    from lines
    semi join bucket_visits
        on bucket_visits.store = cast(lines.store as varchar)
        and bucket_visits.receipt = cast(lines.receipt as varchar)
        and coalesce(bucket_visits.visit_day, lines.sold_at::date) = lines.sold_at::date
)

select * from final;
