-- Every check of the pandera model Choices (demandprep.schemas.choices) on every row of
-- `choices`, as one row of failure counts: a column per check, named <column>__<check> for a
-- column's checks (not_nullable for its nulls) and after the model's method for the checks of
-- the whole table. A null check result passes, as in pandera (ignore_na). The counts are rows,
-- occasions for the checks of whole occasions.
-- Uniqueness of (occasion, alternative) compares each row with the row stored before it (a
-- streaming window: no sort). The build stores `choices` in (occasion, alternative) order, and
-- then a repeated pair sits next to its twin; rows_out_of_key_order counts the rows stored out
-- of that order, and where there are any, 092 counts the repeated pairs by grouping instead.
-- The chooser pattern is checked once per occasion, on its smallest and largest chooser: the
-- chooser is constant within an occasion (occasion_columns_constant), so that is every row.
-- Row checks are count_if (cheaper than filtered counts, and equally blind to nulls).
-- Only the occasions from $checked_from on ('' for all): an incremental build checks the rows
-- it wrote; the kept ones passed the same checks when they were written (choices/scope.py).

with

row_checks as (
    select
        count(*) as row_count,
        count_if(occasion is null) as occasion__not_nullable,
        count_if(chooser is null) as chooser__not_nullable,
        count_if(store is null) as store__not_nullable,
        count_if(occasion_at is null) as occasion_at__not_nullable,
        count_if(alternative is null) as alternative__not_nullable,
        count_if(chosen is null) as chosen__not_nullable,
        count_if(added_to_set is null) as added_to_set__not_nullable,
        count_if(choice_set_size is null) as choice_set_size__not_nullable,
        count_if(sampled is null) as sampled__not_nullable,
        count_if(price_source is null) as price_source__not_nullable,
        count_if(previous_choice is null) as previous_choice__not_nullable,
        count_if(burn_in is null) as burn_in__not_nullable,
        count_if(purchase_count is null) as purchase_count__not_nullable,
        count_if(holdout is null) as holdout__not_nullable,
        count_if(household_known is null) as household_known__not_nullable,
        count_if(not choice_set_size >= 1)
            as choice_set_size__greater_than_or_equal_to,
        count_if(not price >= 0) as price__greater_than_or_equal_to,
        count_if(not list_contains($price_sources, price_source))
            as price_source__isin,
        count_if(not loyalty >= 0) as loyalty__greater_than_or_equal_to,
        count_if(not loyalty <= $loyalty_max) as loyalty__less_than_or_equal_to,
        count_if(not days_since_last_purchase >= 0)
            as days_since_last_purchase__greater_than_or_equal_to,
        count_if(not purchase_count >= 0)
            as purchase_count__greater_than_or_equal_to,
        count_if((price is null) <> list_contains($unpriced_sources, price_source)) as price_null_has_source,
        count_if(promo is null and not list_contains($unpriced_sources, price_source)) as promo_null_has_source,
        count_if((price_source = 'outside') <> (alternative = $outside)) as outside_source_on_none,
        count_if(firm is null and alternative not in ($fringe, $outside)) as firm_null_has_reason,
        count_if((quantity is not null) <> (chosen and alternative <> $outside)
            or (spend is not null) <> (chosen and alternative <> $outside)) as purchase_on_chosen_row,
        count_if(added_to_set and not chosen) as added_only_if_chosen,
        count_if((loyalty is null) <> burn_in) as loyalty_null_in_burn_in,
        count_if((days_since_last_purchase is null) <> (purchase_count = 0)) as days_since_null_without_purchase,
        count_if(alternative = $outside and previous_choice)
            as previous_choice_inside,
    from choices
    where occasion >= $checked_from or occasion is null
),

occasions as (
    -- one group per occasion; a per-occasion column is constant when its smallest and largest
    -- values agree and it is null on all rows or on none (as a grouping by all of them would
    -- have it: nulls group together), which costs a third less than that grouping
    select
        occasion,
        count(*) as row_count,
        count_if(chosen) as chosen_rows,
        min(choice_set_size) as smallest_set_size,
        min(choice_set_size) filter (where not sampled) as smallest_unsampled_set_size,
        max(choice_set_size) filter (where not sampled) as largest_unsampled_set_size,
        min(chooser) as smallest_chooser,
        max(chooser) as largest_chooser,
        min(chooser) is not distinct from max(chooser) and count(chooser) in (0, count(*))
        and min(store) is not distinct from max(store) and count(store) in (0, count(*))
        and min(occasion_at) is not distinct from max(occasion_at)
        and count(occasion_at) in (0, count(*))
        and min(choice_set_size) is not distinct from max(choice_set_size)
        and count(choice_set_size) in (0, count(*))
        and min(holdout) is not distinct from max(holdout) and count(holdout) in (0, count(*))
        and min(burn_in) is not distinct from max(burn_in) and count(burn_in) in (0, count(*))
            as constant_columns,
    from choices
    where occasion >= $checked_from or occasion is null
    group by occasion
),

occasion_checks as (
    select
        count_if(chosen_rows <> 1) as one_chosen_per_occasion,
        count_if(row_count > smallest_set_size
            or row_count <> smallest_unsampled_set_size
            or row_count <> largest_unsampled_set_size) as rows_match_set_size,
        count_if(not constant_columns) as occasion_columns_constant,
        count_if(not regexp_matches(smallest_chooser, $pseudonym_pattern)
            or not regexp_matches(largest_chooser, $pseudonym_pattern)) as chooser__str_matches,
    from occasions
),

stored_keys as (
    select
        occasion,
        alternative,
        row_number() over () as position,
        lag(occasion) over () as previous_occasion,
        lag(alternative) over () as previous_alternative,
    from choices
    where occasion >= $checked_from or occasion is null
),

order_checks as (
    select
        count_if(occasion = previous_occasion and alternative = previous_alternative) as alternative_once_per_occasion,
        count_if(position > 1
            and (
                occasion > previous_occasion
                or (occasion = previous_occasion and alternative >= previous_alternative)
            ) is not true) as rows_out_of_key_order,
    from stored_keys
),

final as (
    select
        row_checks.*,
        occasion_checks.*,
        order_checks.*,
    from row_checks, occasion_checks, order_checks
)

select * from final;
