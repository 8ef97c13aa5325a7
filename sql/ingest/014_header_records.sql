-- the first record of each file: with header = true it must be the header line (checked next)
create temp table ingest_headers as
with

staged as (
    select
        ordinal,
        ingest_file_path as path,
    from ingest_stage
),

final as (
    select
        staged.ordinal,
        staged.path,
    from staged
    join ingest_file_offsets as offsets using (path)
    where staged.ordinal = offsets.start_ordinal + 1
)

select
    ordinal,
    path,
from final
