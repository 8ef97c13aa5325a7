-- Rows of `choices` that repeat an earlier row's (occasion, alternative), found by grouping the
-- pairs: the uniqueness check of 091 for a table not stored in key order (the validation runs
-- this file only when 091 counted rows out of that order), from $checked_from on as 091.

with

pairs as (
    select occasion, alternative, count(*) as copies
    from choices
    where occasion >= $checked_from or occasion is null
    group by occasion, alternative
),

final as (
    select cast(coalesce(sum(copies - 1), 0) as bigint) as alternative_once_per_occasion
    from pairs
    where copies > 1
)

select alternative_once_per_occasion from final;
