-- The choices table, empty, with the columns of 087's rows (they depend on the configured
-- demographics, characteristics and shelf-price columns); 090 fills it part by part.
create or replace table choices as
select * from choice_rows($outside, '', '') limit 0
