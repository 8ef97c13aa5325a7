-- where each file of the batch starts in the reader's output (records come in file order)
create temp table ingest_file_offsets as
with

staged as (
    select
        ingest_file_path,
        ordinal,
    from ingest_stage
),

final as (
    select
        ingest_file_path as path,
        min(ordinal) - 1 as start_ordinal,
    from staged
    group by all
)

select
    path,
    start_ordinal,
from final
