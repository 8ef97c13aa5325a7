-- the SKUs and stores the catalogue and stores table list today (ingest_current_keys) and those
-- listed at the last comparison that they no longer list (ingest_dropped_keys), as views for
-- 073, 074 and ingest/unlisted_keys.py
create or replace temp view ingest_current_keys as
select 'sku' as kind, cast(sku as varchar) as value from catalogue
union all
select 'store' as kind, cast(store as varchar) as value from stores;

create or replace temp view ingest_dropped_keys as
select kind, value from listed_keys
except
select kind, value from ingest_current_keys;
