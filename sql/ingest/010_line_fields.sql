-- one row per physical line of the batch's files: its text without the terminator, its fields
-- split at the configured delimiter ('"' quotes a field, '""' inside quotes is one quote, a
-- quoted field ends on its line) and, when the reader refuses the line, why. A line without
-- quotes keeps no list of fields: it is split where its fields are read (ingest_line_fields,
-- 005), so no copy of every field is stored; its field count is its delimiters plus one, which
-- is the length of string_split's list (tests/test_ingest_fields.py), counted by the reader's
-- threads when they can (`delimiters`, lines.py; null: counted here). Valid text comes without
-- its LF from those threads, so the LF drop below only acts on decoded bytes (and on lines.py's
-- reference path). Run once per piece of lines handed over by the reader (`ingest_lines`: an
-- Arrow table, never copied into a table)
insert into ingest_fields
with

lines as (
    select
        position,
        line_no,
        text as valid_text,
        raw,
        length,
        delimiters,
        plain,
    from ingest_lines
),

-- lines.py gives valid UTF-8 as text and anything else as bytes
decoded as (
    select
        *,
        coalesce(valid_text, try(decode(raw))) as decoded_text,
    from lines
),

-- a line that is not valid text keeps its bytes, in hex digits here (two a byte, so a suffix
-- of two digits is the last byte): its terminator is cut off like a valid line's
without_lf as (
    select
        *,
        case
            when ends_with(decoded_text, chr(10)) then left(decoded_text, -1)
            else decoded_text
        end as line_text,
        case
            when decoded_text is not null then null
            when ends_with(hex(raw), '0A') then left(hex(raw), -2)
            else hex(raw)
        end as raw_hex,
    from decoded
),

-- CRLF is one terminator: the CR just before the LF goes too
unterminated as (
    select
        *,
        case
            when ends_with(line_text, chr(13)) then left(line_text, -1)
            else line_text
        end as text,
        case
            when ends_with(raw_hex, '0D') then left(raw_hex, -2)
            else raw_hex
        end as raw_hex_unterminated,
    from without_lf
),

-- a field: quoted ("" inside is one quote), or not starting with a quote, or empty; the
-- general pattern costs some microseconds a line, so lines without quotes skip it
split as (
    select
        *,
        text is not null and not contains(text, '"') as unquoted,
        case
            when text is null then null
            when not contains(text, '"') then null
            -- every field quoted, no quote inside one (a common export): split between them
            when regexp_full_match(
                text,
                '"[^"]*"(?:' || regexp_escape($delimiter) || '"[^"]*")*'
            ) then string_split(text[2:-2], '"' || $delimiter || '"')
            when regexp_full_match(
                text,
                '(?:"(?:[^"]|"")*"|[^"' || regexp_escape($delimiter) || '][^'
                || regexp_escape($delimiter) || ']*|)(?:' || regexp_escape($delimiter)
                || '(?:"(?:[^"]|"")*"|[^"' || regexp_escape($delimiter) || '][^'
                || regexp_escape($delimiter) || ']*|))*'
            ) then list_transform(
                regexp_extract_all(
                    text,
                    '(?:^|' || regexp_escape($delimiter) || ')("(?:[^"]|"")*"|[^"'
                    || regexp_escape($delimiter) || '][^' || regexp_escape($delimiter)
                    || ']*|)',
                    1
                ),
                lambda field: case
                    when starts_with(field, '"') then replace(field[2:-2], '""', '"')
                    else field
                end
            )
        end as quoted_fields,
    from unterminated
),

classified as (
    select
        *,
        case
            when length > $max_line_bytes then 'line_too_long'
            when text is null then 'unparseable_field'
            when contains(text, chr(13)) then 'stray_carriage_return'
            when unquoted then null
            when quoted_fields is null and (length(text) - length(replace(text, '"', ''))) % 2 = 1
                then 'unclosed_quote'
            when quoted_fields is null then 'unparseable_field'
        end as reason,
    from split
),

final as (
    select
        (position::bigint << 40) + line_no as ordinal,
        position,
        line_no,
        case
            -- a too-long line keeps its start; one that is not valid text, its bytes escaped
            when reason = 'line_too_long' then left(coalesce(text, raw::varchar), $kept_bytes)
            when text is null then from_hex(raw_hex_unterminated)::varchar
            else text
        end as text,
        case when reason is null then quoted_fields end as fields,
        -- stored beside the list: the width checks need not scan the lists
        case
            when reason is null and unquoted then coalesce(
                delimiters,
                (strlen(text) - strlen(replace(text, $delimiter, ''))) // strlen($delimiter)
            ) + 1
            when reason is null then len(quoted_fields)
        end as field_count,
        reason,
        case reason
            when 'line_too_long' then 'the line has ' || length || ' bytes, more than '
                || $max_line_bytes || '; original_text keeps its start'
            when 'unparseable_field' then case
                when text is null then 'the line is not valid ' || $encoding
                else 'a quoted field has text after its closing quote'
            end
            when 'stray_carriage_return' then 'a carriage return (CR) inside the line'
            when 'unclosed_quote' then 'a quoted field is not closed on its line'
        end as detail,
        (text is null or text <> '') and not ($header and line_no = 1) as record,
        -- no field of the line changes under trim (005's ingest_trim): an unquoted ASCII line
        -- (strlen = length) with no space at its ends or beside a delimiter; one test a line
        -- costs less than ingest_trim's three on every field (020). The reader's threads
        -- judge most lines (`plain`, lines.py; null: judged here)
        unquoted and coalesce(
            plain,
            strlen(text) = length(text)
            and not starts_with(text, ' ') and not ends_with(text, ' ')
            and not contains(text, ' ' || $delimiter) and not contains(text, $delimiter || ' ')
        ) as trimmed,
    from classified
)

select
    ordinal,
    position,
    line_no,
    text,
    fields,
    field_count,
    reason,
    detail,
    record,
    trimmed,
from final
