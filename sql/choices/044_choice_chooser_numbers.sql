-- A number for each chooser with an occasion (1, 2, ... in pseudonym order), the key of the
-- history and loyalty tables (045 to 049) in place of the 32-character pseudonym: their tens
-- of millions of rows (a chooser and purchase count per alternative ever bought, in 048) are
-- grouped, sorted and spilled on this key, and a BIGINT is a sixth of the pseudonym's bytes.
-- TEMP and never exported: it lives only while the history is built.
create or replace temp table choice_chooser_numbers as
select chooser, row_number() over (order by chooser) as chooser_number,
from (select distinct chooser from choice_occasions);
