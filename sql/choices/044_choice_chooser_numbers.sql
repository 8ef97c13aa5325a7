-- A number for each chooser with an occasion, the key of the history and loyalty tables (045
-- to 049) in place of the 32-character pseudonym: their tens of millions of rows (a chooser
-- and purchase count per alternative ever bought, in 048) are grouped, sorted and spilled on
-- this key, and a BIGINT is a sixth of the pseudonym's bytes. Kept between builds (043), so a
-- kept history row keeps its chooser: the choosers not numbered yet get the next numbers, in
-- pseudonym order (a full build: 1, 2, ...). Only a key: no output depends on its values.
-- Never exported.
insert into choice_chooser_numbers
with

new_choosers as (
    select distinct chooser from choice_occasions
    anti join choice_chooser_numbers using (chooser)
),

numbered_so_far as (
    select coalesce(max(chooser_number), 0) as last_number from choice_chooser_numbers
)

select
    new_choosers.chooser,
    numbered_so_far.last_number + row_number() over (order by new_choosers.chooser)
        as chooser_number,
from new_choosers, numbered_so_far;
