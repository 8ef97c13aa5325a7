-- Every check of the pandera model RawLines (demandprep.schemas.ingest) on every accepted line
-- of the batch, as one row of failure counts: a column per check, named <column>__<check> for a
-- column's checks (not_nullable for its nulls) and after the model's method for the check of
-- the whole table. A null check result passes, as in pandera (ignore_na). The column types are
-- the table's own, checked by pandera on a sample (ingest/line_checks.py).

with

batch_lines as (
    select
        file_id,
        line_no,
        receipt,
        store,
        sold_at,
        sku,
        quantity,
        amount,
        discount,
        line_kind,
    from raw_lines
    where file_id >= $first_file_id and file_id <= $last_file_id
),

final as (
    select
        count(*) as row_count,
        count(*) filter (where file_id is null) as file_id__not_nullable,
        count(*) filter (where line_no is null) as line_no__not_nullable,
        count(*) filter (where receipt is null) as receipt__not_nullable,
        count(*) filter (where store is null) as store__not_nullable,
        count(*) filter (where sold_at is null) as sold_at__not_nullable,
        count(*) filter (where sku is null) as sku__not_nullable,
        count(*) filter (where quantity is null) as quantity__not_nullable,
        count(*) filter (where amount is null) as amount__not_nullable,
        count(*) filter (where discount is null) as discount__not_nullable,
        count(*) filter (where line_kind is null) as line_kind__not_nullable,
        count(*) filter (where not line_no >= $min_line_no) as line_no__greater_than_or_equal_to,
        count(*) filter (where not list_contains($line_kinds, line_kind)) as line_kind__isin,
        count(*) filter (
            where line_kind = 'sale' and not (quantity > 0 and amount >= 0)
        ) as sales_have_positive_quantity_and_non_negative_amount,
    from batch_lines
)

select * from final;
