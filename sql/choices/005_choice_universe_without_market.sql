-- No market build ran: an empty universe, read by 010 as "every category product is kept".
create or replace table choice_universe (
    product varchar,
    kept boolean,
);
