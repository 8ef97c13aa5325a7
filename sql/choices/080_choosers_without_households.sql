-- choosers as in 080_choosers.sql, for a config without a households file.
create or replace table choosers as

with

occasion_counts as (
    select
        chooser,
        count(*) as occasions,
        count(*) filter (where is_purchase) as purchase_occasions,
        min(occasion_at) as first_occasion_at,
        max(occasion_at) as last_occasion_at,
    from choice_occasions
    group by chooser
),

final as (
    select
        choice_pseudonyms.chooser,
        choice_pseudonyms.holdout,
        false as household_known,
        occasion_counts.occasions,
        occasion_counts.purchase_occasions,
        occasion_counts.first_occasion_at,
        occasion_counts.last_occasion_at,
    from choice_pseudonyms
    join occasion_counts using (chooser)
)

select
    chooser,
    holdout,
    household_known,
    occasions,
    purchase_occasions,
    first_occasion_at,
    last_occasion_at,
from final
order by chooser;
