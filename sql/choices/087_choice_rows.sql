-- The long chooser-alternative rows of the occasions from first_occasion on and before
-- after_occasion (null: to the last): one row per occasion and alternative of its (sampled) set,
-- with the alternative's price, promo flag and attributes at the occasion, the chosen row's
-- quantity and spend, the chooser's history from earlier occasions, holdout flag and
-- demographics. Each occasion's row (with its store-day's map: 086's choice_occasion_maps) is
-- unnested into its rows, its alternatives looked up in that map; `outside` is the outside
-- option's alternative id. A table macro: 088 takes the table's columns from it and
-- 090 writes each part of the occasions with it.
-- choice_occasion_sets is stored in occasion order with sorted sets, so the rows come in
-- (occasion, alternative) order, which lets the validation and the export skip a sort (both
-- check the order and sort when it is not kept).
create or replace temp macro choice_rows(outside, first_occasion, after_occasion) as table

with

occasions as (
    select * from choice_occasion_maps(first_occasion, after_occasion)
),

occasion_rows as (
    select
        * exclude (alternatives, alternative_info),
        unnest(alternatives) as alternative,
        -- the same positions of the looked-up rows ('none' has no row: null); most occasions
        -- offer exactly their store-day's priced alternatives, whose rows need no lookup
        unnest(
            case
                when alternatives = map_keys(alternative_info) then map_values(alternative_info)
                else list_transform(alternatives, lambda a: alternative_info[a])
            end
        ) as info,
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
        case when alternative = outside then 'outside' else info.price_source end
            as price_source,
        info.promo,
        -- extra shelf-price columns (e.g. display), then firm, nest and characteristics
        info.* exclude (price, price_source, promo),
        case when alternative = chosen_alternative then quantity end as quantity,
        case when alternative = chosen_alternative then spend end as spend,
        list_contains(previous_alternatives, alternative) as previous_choice,
        case
            when not burn_in
                then coalesce(loyalty_values[list_position(loyalty_alternatives, alternative)], 0.0)
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
            loyalty_alternatives,
            loyalty_values,
            burn_in,
            days_since_last_purchase,
            purchase_count,
            holdout,
            household_known,
        ),
    from occasion_rows
)

select * from final
