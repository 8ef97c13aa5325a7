-- One row per occasion with everything its rows need but prices and attributes: the choice set
-- as a sorted list (the store-day's set, plus the chosen alternative when it was missing from
-- it), sampled when choices.sampled_alternatives is set, the history from earlier occasions
-- (previous purchase, loyalty by alternative, counts), the chooser's holdout flag and
-- demographics, and the store-day's position among the price maps (store_day_index).
-- Sampling keeps the chosen alternative plus $sample_size others drawn uniformly without
-- replacement (McFadden 1978: conditional logit on such sets stays consistent): the others are
-- ordered by md5(occasion, alternative), so the draw is fixed by the occasion on every rebuild.
-- Stored in occasion order (the stage keeps insertion order), with every join done here, before
-- the sort: 090 then unnests these rows without joining, so `choices` lands in (occasion,
-- alternative) order without sorting its rows. An incremental build makes the rows of the
-- occasions from $rebuilt_from on only (056); their ids sort after every kept occasion's (030).
create or replace table choice_occasion_sets as

with

occasions as (
    select
        choice_occasions.occasion,
        choice_occasions.chooser,
        choice_occasions.store,
        choice_occasions.occasion_at,
        choice_occasions.day,
        choice_occasions.chosen_alternative,
        choice_occasions.is_purchase,
        choice_occasions.quantity,
        choice_occasions.spend,
        coalesce(choice_store_day_sets.alternatives, []) as store_day_set,
        choice_visit_history.burn_in,
        choice_visit_history.purchase_count,
        choice_visit_history.days_since_last_purchase,
        coalesce(choice_visit_history.previous_alternatives, []) as previous_alternatives,
        choice_visit_loyalty.loyalty_alternatives,
        choice_visit_loyalty.loyalty_values,
        choice_store_days.store_day_index,
        choice_store_day_markets.market,
        choosers.holdout,
        choosers.household_known,
        -- the configured demographics
        choosers.* exclude (
            chooser,
            holdout,
            household_known,
            occasions,
            purchase_occasions,
            first_occasion_at,
            last_occasion_at,
        ),
    from choice_occasions
    left join choice_store_day_sets using (store, day)
    left join choice_store_days using (store, day)
    left join choice_store_day_markets using (store, day)
    left join choosers using (chooser)
    join choice_visit_history using (visit_number)
    left join choice_visit_loyalty
        on choice_visit_loyalty.chooser_number = choice_visit_history.chooser_number
        and choice_visit_loyalty.loyalty_rank = choice_visit_history.loyalty_rank
    -- the occasions this build recomputes (056): all, or those from $rebuilt_from on (none
    -- when it is null)
    where $every_occasion or choice_occasions.day >= $rebuilt_from
),

full_sets as (
    select
        *,
        not list_contains(store_day_set, chosen_alternative) as chosen_added,
        case
            when list_contains(store_day_set, chosen_alternative) then store_day_set
            else list_sort(list_append(store_day_set, chosen_alternative))
        end as full_set,
    from occasions
),

sampled_sets as (
    select
        *,
        len(full_set) as choice_set_size,
        $sample_size is not null and len(full_set) > $sample_size + 1 as sampled,
        case
            when $sample_size is null or len(full_set) <= $sample_size + 1 then full_set
            else list_sort(list_append(
                list_slice(
                    list_transform(
                        list_sort(list_transform(
                            list_filter(full_set, lambda a: a <> chosen_alternative),
                            lambda a: [md5(occasion || chr(31) || a), a]
                        )),
                        lambda drawn: drawn[2]
                    ),
                    1,
                    $sample_size
                ),
                chosen_alternative
            ))
        end as alternatives,
    from full_sets
),

final as (
    select
        occasion,
        chooser,
        store,
        market,
        occasion_at,
        day,
        chosen_alternative,
        quantity,
        spend,
        chosen_added,
        choice_set_size,
        sampled,
        alternatives,
        burn_in,
        purchase_count,
        days_since_last_purchase,
        previous_alternatives,
        loyalty_alternatives,
        loyalty_values,
        store_day_index,
        holdout,
        household_known,
        -- the configured demographics: every column not named above
        sampled_sets.* exclude (
            occasion,
            chooser,
            store,
            market,
            occasion_at,
            day,
            chosen_alternative,
            is_purchase,
            quantity,
            spend,
            store_day_set,
            burn_in,
            purchase_count,
            days_since_last_purchase,
            previous_alternatives,
            loyalty_alternatives,
            loyalty_values,
            store_day_index,
            holdout,
            household_known,
            chosen_added,
            full_set,
            choice_set_size,
            sampled,
            alternatives,
        ),
    from sampled_sets
)

select * from final order by occasion;
