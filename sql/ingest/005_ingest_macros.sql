-- number parsing shared by every source: the configured decimal mark, no thousands marks (not
-- '1,000', '1 000' or '1_000'), plain digits with an optional exponent, finite values only
-- ('inf' and 'nan' are not quantities); DuckDB's own casts accept '1_000' and '0x10'
create or replace temp macro ingest_finite(value) as
    case when isfinite(value) then value end;

create or replace temp macro ingest_number(text, mark) as
    ingest_finite(
        case
            when mark = ',' and contains(text, '.') then null
            when regexp_full_match(
                replace(text, mark, '.'), '[+-]?([0-9]+([.][0-9]*)?|[.][0-9]+)([eE][+-]?[0-9]+)?'
            ) then try_cast(replace(text, mark, '.') as double)
        end
    );

create or replace temp macro ingest_integer(text) as
    case when regexp_full_match(text, '[+-]?[0-9]+') then try_cast(text as bigint) end;
