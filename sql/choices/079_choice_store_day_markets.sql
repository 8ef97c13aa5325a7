-- The market of each store-day, when the market build has one: the share table's market id
-- for the store's geography and the day's period (market_store_geographies, markets). A
-- store-day outside every market (no in-scope sale in its geography and period, or no market
-- build) has no row, so its choice rows carry a null market.
create or replace table choice_store_day_markets as

with

calendar as (
    select
        day,
        period_start,
    from choice_calendar
),

store_geographies as (
    select
        store,
        geography,
    from choice_input_market_store_geographies
),

markets as (
    select distinct
        market,
        geography,
        period_start,
    from choice_input_markets
),

final as (
    select
        store_geographies.store,
        calendar.day,
        markets.market,
    from calendar
    inner join markets using (period_start)
    inner join store_geographies using (geography)
)

select store, day, market from final;
