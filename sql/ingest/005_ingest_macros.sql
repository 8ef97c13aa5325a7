-- number parsing shared by every source: the configured decimal mark, no thousands marks (not
-- '1,000', '1 000' or '1_000'), finite values only ('inf' and 'nan' are not quantities).
-- DuckDB's double cast takes '1_000' as 1000 (and nothing else outside plain decimal
-- notation), so an underscore is refused before the cast; a contains() is far cheaper than a
-- regular expression on every amount of every line.
create or replace temp macro ingest_finite(value) as
    case when isfinite(value) then value end;

create or replace temp macro ingest_number_unbounded(text, mark) as
    case
        when mark = ',' and contains(text, '.') then null
        when contains(text, '_') then null
        else try_cast(replace(text, mark, '.') as double)
    end;

create or replace temp macro ingest_number(text, mark) as
    ingest_finite(ingest_number_unbounded(text, mark));

-- a receipt's number: as ingest_number, except that one written in digits but too large for a
-- double ('1e400', cast to infinity) stays infinite, so that the bounds of 020 call it out of
-- range rather than not a number; 'inf', 'infinity' and 'nan' (each with an n) stay null. The
-- second branch runs only for values that are not finite
create or replace temp macro ingest_receipt_number(text, mark) as
    case
        when isfinite(ingest_number_unbounded(text, mark)) then ingest_number_unbounded(text, mark)
        when not contains(lower(text), 'n') then ingest_number_unbounded(text, mark)
    end;

-- a quarantine detail: the field and what is wrong with it, plus the value as written only when
-- values_shown (sources without card ids: a card id can sit in any field of a line that has one)
create or replace temp macro ingest_problem(field, problem, value, values_shown) as
    field || ': ' || problem
    || case when values_shown and value is not null then ' (''' || value || ''')' else '' end;
-- whole numbers as written: the bigint cast also takes '1_000', '0x10', '0b11', '.5' and '1e5'
create or replace temp macro ingest_integer(text) as
    case when regexp_full_match(text, '[+-]?[0-9]+') then try_cast(text as bigint) end;
-- trim(text) without its cost on most fields: trim removes only Unicode space separators, and
-- the only one in ASCII is ' ', so plain ASCII text not starting or ending with ' ' is already
-- trimmed (tests/test_ingest_trim.py tries every code point against trim itself)
create or replace temp macro ingest_trim(text) as
    case
        when starts_with(text, ' ') or ends_with(text, ' ') or strlen(text) <> length(text)
            then trim(text)
        else text
    end;
-- a receipt field trimmed, unless 010 found that no field of its line changes under trim
create or replace temp macro ingest_trim_unless(text, trimmed) as
    case when trimmed then text else ingest_trim(text) end;
-- the fields of a line of ingest_fields (010) that the reader takes (null for one it refuses):
-- a quoted line's list as 010 split it, any other line split at the delimiter here
create or replace temp macro ingest_line_fields(text, fields, reason, delimiter) as
    case when reason is null then coalesce(fields, string_split(text, delimiter)) end;
