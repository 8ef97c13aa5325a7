-- The stored market_sizes rows of peak_multiple assumptions, in periods this build keeps, whose
-- size is no longer the geography's peak volume x multiple: a recomputed period moved the peak,
-- so every period of that geography needs its size again (market/slices.py).
with

assumptions as (
    select
        assumption,
        multiple,
    from market_settings_assumptions
    where method = 'peak_multiple'
),

kept_sizes as (
    select
        assumption,
        geography,
        market_size,
    from market_sizes
    anti join market_slice_periods using (period_start)
),

final as (
    select
        count(*) as moved,
    from kept_sizes
    inner join assumptions using (assumption)
    left join market_peak_volumes using (geography)
    where kept_sizes.market_size
        is distinct from market_peak_volumes.peak_volume * assumptions.multiple
)

select moved from final
