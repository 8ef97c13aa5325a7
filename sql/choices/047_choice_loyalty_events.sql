-- Purchases after the burn-in window, prepared for the closed form of the loyalty recursion
-- (Guadagni & Little 1983):  L_j(n) = lambda L_j(n-1) + (1 - lambda) x_j(n),  where x_j(n) is
-- the weight of j in the chooser's n-th purchase visit after burn-in. Unrolled,
--     L_j(n) = lambda^n L_j(0) + (1 - lambda) * sum_{r <= n} lambda^(n - r) x_j(r).
-- lambda^(n - r) = lambda^(n - s) * lambda^-(r - s) for any s, so within a block of B purchases
-- starting at s the sum is a running sum of lambda^-position * x (position = r - s < B; B is
-- chosen so lambda^-B stays near exp(600)). Older blocks enter through the previous block's
-- total; blocks before that are weighted by lambda^B, about exp(-600), and vanish.
-- The running sum adds each block's terms one by one from its first purchase (list_sum of the
-- list's first k terms), so a purchase's sum depends on its earlier purchases only: DuckDB's
-- windowed sum returns different last bits for the same rows when the partition or the rows
-- sorted around it grow, and an incremental build keeps the loyalty of earlier occasions
-- (choices/scope.py). A block holds one chooser's purchases of one alternative (at most a few
-- hundred in the demo worlds; the k-th sum reads k terms).
create or replace table choice_loyalty_events as

with

purchase_visits as (
    select visit_number, chooser_number, loyalty_rank + 1 as purchase_rank
    from choice_visit_history
    where is_purchase and not burn_in
),

events as (
    select
        purchase_visits.chooser_number,
        choice_occasions.chosen_alternative as alternative,
        purchase_visits.purchase_rank,
        sum(choice_occasions.history_weight) as weight,
    from purchase_visits
    join choice_occasions using (visit_number)
    group by all
),

blocked as (
    select
        *,
        (purchase_rank - 1) // $loyalty_block as block,
        (purchase_rank - 1) % $loyalty_block as block_position,
    from events
),

block_terms as (
    select
        chooser_number,
        alternative,
        block,
        list(purchase_rank order by purchase_rank) as purchase_ranks,
        list(weight * pow($smoothing, -block_position) order by purchase_rank) as terms,
    from blocked
    group by chooser_number, alternative, block
),

summed as (
    select
        chooser_number,
        alternative,
        block,
        unnest(purchase_ranks) as purchase_rank,
        unnest(
            list_transform(range(1, len(terms) + 1), lambda k: list_sum(list_slice(terms, 1, k)))
        ) as block_sum,
    from block_terms
),

block_totals as (
    select
        chooser_number,
        alternative,
        block,
        list_sum(terms) as block_total,
    from block_terms
),

final as (
    select
        summed.chooser_number,
        summed.alternative,
        summed.purchase_rank,
        summed.block,
        summed.block_sum,
        coalesce(block_totals.block_total, 0.0) as previous_block_total,
    from summed
    left join block_totals
        on block_totals.chooser_number = summed.chooser_number
        and block_totals.alternative = summed.alternative
        and block_totals.block = summed.block - 1
)

select
    chooser_number, alternative, purchase_rank, block, block_sum, previous_block_total,
from final;
