-- Boolean flags that go with the instruments (e.g. iv_hausman_missing), in long form.
create or replace table instrument_flags (
    market varchar not null,
    product varchar not null,
    period_start date not null,
    flag varchar not null,
    family varchar not null,
    source varchar,
    value boolean not null
)
