-- No shelf-price file: every choice set comes from the products sold in the store.
create or replace table choice_shelf (
    store varchar,
    date date,
    sku varchar,
    alternative varchar,
    price double,
    promo boolean,
);
