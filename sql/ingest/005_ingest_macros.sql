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

-- a quarantine detail: the field and what is wrong with it, plus the value as written only when
-- values_shown (sources without card ids: a card id can sit in any field of a line that has one)
create or replace temp macro ingest_problem(field, problem, value, values_shown) as
    field || ': ' || problem
    || case when values_shown and value is not null then ' (''' || value || ''')' else '' end;
