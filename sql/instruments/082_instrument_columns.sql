-- The catalogue of the iv_ columns this build produced: which family made each one and from
-- which characteristic or shifter; the data dictionary and the first stage read it.
create or replace table instrument_columns as

with

instrument_names as (
    select distinct
        instrument as column_name,
        'instrument' as role,
        family,
        source,
    from iv_stored_values
),

flag_names as (
    select distinct
        flag as column_name,
        'flag' as role,
        family,
        source,
    from iv_stored_flags
),

final as (
    select column_name, role, family, source from instrument_names
    union all
    select column_name, role, family, source from flag_names
)

select
    column_name,
    role,
    family,
    source,
from final
order by column_name
