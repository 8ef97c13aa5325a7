-- The long chooser-alternative table: one row per occasion and alternative of its (sampled) set,
-- with the alternative's price, promo flag and attributes at the occasion, the chosen row's
-- quantity and spend, the chooser's history from earlier occasions, holdout flag and
-- demographics. Occasions are joined to small tables (store-day info, choosers) first and only
-- then unnested into rows, so the rows of one occasion are written together (the export orders
-- the file by occasion and alternative).
create or replace table choices as

with

occasions as (
    select
        choice_occasion_sets.occasion,
        choice_occasion_sets.chooser,
        choice_occasion_sets.store,
        choice_occasion_sets.occasion_at,
        choice_occasion_sets.chosen_alternative,
        choice_occasion_sets.quantity,
        choice_occasion_sets.spend,
        choice_occasion_sets.chosen_added,
        choice_occasion_sets.choice_set_size,
        choice_occasion_sets.sampled,
        choice_occasion_sets.burn_in,
        choice_occasion_sets.purchase_count,
        choice_occasion_sets.days_since_last_purchase,
        choice_occasion_sets.previous_alternatives,
        choice_occasion_sets.loyalty_by_alternative,
        choice_occasion_sets.alternatives,
        choice_store_day_info.alternative_info,
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
    from choice_occasion_sets
    left join choice_store_day_info using (store, day)
    left join choice_store_day_markets using (store, day)
    left join choosers using (chooser)
),

occasion_rows as (
    select
        * exclude (alternatives, alternative_info),
        unnest(alternatives) as alternative,
        -- the same positions of the looked-up rows ('none' has no row: null)
        unnest(list_transform(alternatives, lambda a: alternative_info[a])) as info,
    from occasions
),

final as (
    select
        occasion,
        chooser,
        store,
        market,
        occasion_at,
        alternative,
        alternative = chosen_alternative as chosen,
        chosen_added and alternative = chosen_alternative as added_to_set,
        choice_set_size,
        sampled,
        info.price,
        case when alternative = $outside then 'outside' else info.price_source end
            as price_source,
        info.promo,
        -- extra shelf-price columns (e.g. display), then firm, nest and characteristics
        info.* exclude (store, day, alternative, price, price_source, promo),
        case when alternative = chosen_alternative then quantity end as quantity,
        case when alternative = chosen_alternative then spend end as spend,
        list_contains(previous_alternatives, alternative) as previous_choice,
        case
            when not burn_in then coalesce(loyalty_by_alternative[alternative], 0.0)
        end as loyalty,
        burn_in,
        days_since_last_purchase,
        purchase_count,
        holdout,
        household_known,
        -- the configured demographics: every column not named above
        occasion_rows.* exclude (
            occasion,
            chooser,
            store,
            market,
            occasion_at,
            alternative,
            chosen_alternative,
            chosen_added,
            choice_set_size,
            sampled,
            info,
            quantity,
            spend,
            previous_alternatives,
            loyalty_by_alternative,
            burn_in,
            days_since_last_purchase,
            purchase_count,
            holdout,
            household_known,
        ),
    from occasion_rows
)

select * from final;
