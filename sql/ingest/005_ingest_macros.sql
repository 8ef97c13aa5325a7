-- number parsing shared by every source: the configured decimal mark, no thousands marks,
-- finite values only ('inf' and 'nan' are not quantities)
create or replace temp macro ingest_finite(value) as
    case when isfinite(value) then value end;

create or replace temp macro ingest_number(text, mark) as
    ingest_finite(
        case
            when mark = ',' and contains(text, '.') then null
            else try_cast(replace(text, mark, '.') as double)
        end
    );
