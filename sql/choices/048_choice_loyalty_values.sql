-- Loyalty of every alternative the chooser has bought (or started with), for each number n of
-- purchases after the burn-in window, from the closed form prepared in 047, one row each
-- (049 gathers them per chooser and n); alternatives never bought have loyalty 0. Each purchase
-- of an alternative (and the start before its first one) holds until the next purchase of it,
-- so its block sums are spread over that stretch of n:
--   L_j(n) = lambda^n L_j(0)
--          + (1 - lambda) lambda^p * (running sum of block b)
--          + (1 - lambda) lambda^(p + 1) * lambda^(B - 1) * (total of block b - 1)
-- where the latest purchase before n sits at position p = (n - 1) % B of block b = (n - 1) // B.
-- Only the ranks from the lowest one an occasion of this build reads (056: every occasion, or
-- those from $rebuilt_from on) are valued: each value is its own closed form, so leaving out
-- earlier ranks changes no other.
create or replace table choice_loyalty_values as

with

chooser_ranks as (
    select chooser_number, max(loyalty_rank) as last_rank
    from choice_visit_history
    where not burn_in
    group by chooser_number
),

needed_ranks as (
    select chooser_number, min(loyalty_rank) as first_needed_rank
    from choice_visit_history
    where $every_occasion or day >= $rebuilt_from
    group by chooser_number
),

first_purchases as (
    select chooser_number, alternative, min(purchase_rank) as first_rank
    from choice_loyalty_events
    group by chooser_number, alternative
),

start_stretches as (
    select
        choice_loyalty_start.chooser_number,
        choice_loyalty_start.alternative,
        0 as from_rank,
        coalesce(first_purchases.first_rank - 1, chooser_ranks.last_rank) as to_rank,
        cast(null as bigint) as event_block,
        0.0 as block_sum,
        0.0 as previous_block_total,
    from choice_loyalty_start
    join chooser_ranks using (chooser_number)
    left join first_purchases using (chooser_number, alternative)
),

purchase_stretches as (
    select
        choice_loyalty_events.chooser_number,
        choice_loyalty_events.alternative,
        choice_loyalty_events.purchase_rank as from_rank,
        least(
            coalesce(
                lead(choice_loyalty_events.purchase_rank) over (
                    partition by
                        choice_loyalty_events.chooser_number,
                        choice_loyalty_events.alternative
                    order by choice_loyalty_events.purchase_rank
                ) - 1,
                chooser_ranks.last_rank
            ),
            chooser_ranks.last_rank
        ) as to_rank,
        choice_loyalty_events.block as event_block,
        choice_loyalty_events.block_sum,
        choice_loyalty_events.previous_block_total,
    from choice_loyalty_events
    join chooser_ranks using (chooser_number)
),

stretches as (
    select * from start_stretches
    union all
    select * from purchase_stretches
),

needed_stretches as (
    select
        stretches.* replace (greatest(stretches.from_rank, needed_ranks.first_needed_rank)
            as from_rank),
    from stretches
    join needed_ranks using (chooser_number)
),

ranks as (
    select
        chooser_number,
        alternative,
        event_block,
        block_sum,
        previous_block_total,
        unnest(range(from_rank, to_rank + 1)) as loyalty_rank,
    from needed_stretches
    where to_rank >= from_rank
),

valued as (
    select
        ranks.chooser_number,
        ranks.loyalty_rank,
        ranks.alternative,
        pow($smoothing, ranks.loyalty_rank) * coalesce(choice_loyalty_start.start_loyalty, 0.0)
        + case when ranks.loyalty_rank = 0 then 0.0 else
            (1 - $smoothing) * (
                pow($smoothing, (ranks.loyalty_rank - 1) % $loyalty_block) * case
                    when ranks.event_block = (ranks.loyalty_rank - 1) // $loyalty_block
                        then ranks.block_sum
                    else 0.0
                end
                + pow($smoothing, (ranks.loyalty_rank - 1) % $loyalty_block + 1) * (
                    pow($smoothing, $loyalty_block - 1) * case
                        when ranks.event_block = (ranks.loyalty_rank - 1) // $loyalty_block
                            then ranks.previous_block_total
                        when ranks.event_block = (ranks.loyalty_rank - 1) // $loyalty_block - 1
                            then ranks.block_sum
                        else 0.0
                    end
                )
            )
        end as loyalty,
    from ranks
    left join choice_loyalty_start using (chooser_number, alternative)
)

select chooser_number, loyalty_rank, alternative, loyalty from valued;
