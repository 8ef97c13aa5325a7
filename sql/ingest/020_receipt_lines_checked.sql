-- every receipt line of one batch of files, typed, with the first rule it breaks (reason null = accepted);
-- duplicates are found afterwards among the accepted lines (030). The file is the ordinal's
-- high bits (its position in ingest_batch_files, reader.py): a copy of its path on every line
-- cost more than any step that needs it pays to look it up
create temp table ingest_checked as
with

source_lines as (
    select * from ingest_source_lines
),

store_timezones as (
    select store, timezone from ingest_store_timezones
),

-- ingest_trimmed: 010 found no field of the line that trim would change (005)
trimmed as (
    select
        ordinal,
        line_no,
        nullif(ingest_trim_unless(receipt, ingest_trimmed), '') as receipt,
        nullif(ingest_trim_unless(line, ingest_trimmed), '') as line_text,
        nullif(ingest_trim_unless(store, ingest_trimmed), '') as store,
        nullif(ingest_trim_unless(sold_at, ingest_trimmed), '') as sold_at_text,
        nullif(ingest_trim_unless(sku, ingest_trimmed), '') as sku,
        nullif(ingest_trim_unless(quantity, ingest_trimmed), '') as quantity_text,
        nullif(ingest_trim_unless(amount, ingest_trimmed), '') as amount_text,
        nullif(ingest_trim_unless(discount, ingest_trimmed), '') as discount_text,
        nullif(ingest_trim_unless(card, ingest_trimmed), '') as card,
        coalesce(lower(nullif(ingest_trim_unless(line_kind, ingest_trimmed), '')), 'sale') as line_kind,
    from source_lines
),

typed as (
    select
        *,
        ingest_integer(line_text) as line,
        case
            when $timestamp_format is null then try_cast(sold_at_text as timestamp)
            else try_strptime(sold_at_text, $timestamp_format)
        end as sold_at_written,
        -- infinite when written in digits but too large for a double: out of range below
        ingest_receipt_number(quantity_text, $decimal) as quantity,
        ingest_receipt_number(amount_text, $decimal) as amount,
        ingest_receipt_number(discount_text, $decimal) as discount,
    from trimmed
),

-- written in the source's timezone when one is configured: convert to the store's local time
localised as (
    select
        typed.*,
        case
            when $source_timezone is null then sold_at_written
            else timezone(
                coalesce(store_timezones.timezone, $source_timezone),
                timezone($source_timezone, sold_at_written)
            )
        end as sold_at,
    from typed
    left join store_timezones on store_timezones.store = typed.store
),

known_stores as (
    select distinct store from stores
),

known_skus as (
    select distinct sku from catalogue
),

flagged as (
    select
        localised.*,
        known_stores.store is not null as store_known,
        known_skus.sku is not null as sku_known,
    from localised
    left join known_stores on known_stores.store = localised.store
    left join known_skus on known_skus.sku = localised.sku
),

-- the first rule a line breaks, and which of our fields broke it (for the refusal message)
classified as (
    select
        *,
        case
            when receipt is null or store is null or sold_at_text is null or sku is null
                or quantity_text is null or amount_text is null
                then 'missing_required_field'
            when (line_text is not null and line is null)
                or sold_at is null
                or quantity is null
                or amount is null
                or (discount_text is not null and discount is null)
                then 'unparseable_field'
            -- bounds: the plausibility limits, never beyond what DECIMAL(18, 6) holds
            when abs(quantity) > $max_quantity
                or abs(amount) > $max_amount
                or abs(coalesce(discount, 0)) > $max_amount
                then 'value_out_of_range'
            when line_kind not in ('sale', 'return', 'void') then 'unknown_line_kind'
            when sold_at < $valid_from or sold_at >= $valid_until then 'timestamp_out_of_range'
            when line_kind = 'sale' and quantity <= 0 then 'non_positive_quantity'
            when line_kind = 'sale' and amount < 0 then 'negative_amount'
            when line_kind = 'return' and (quantity >= 0 or amount > 0) then 'return_not_negative'
            when not store_known then 'unknown_store'
            when not sku_known then 'unknown_sku'
        end as reason,
        case reason
            when 'missing_required_field' then case
                when receipt is null then 'receipt'
                when store is null then 'store'
                when sold_at_text is null then 'sold_at'
                when sku is null then 'sku'
                when quantity_text is null then 'quantity'
                else 'amount'
            end
            when 'unparseable_field' then case
                when line_text is not null and line is null then 'line'
                when sold_at is null then 'sold_at'
                when quantity is null then 'quantity'
                when amount is null then 'amount'
                else 'discount'
            end
            when 'value_out_of_range' then case
                when abs(quantity) > $max_quantity then 'quantity'
                when abs(amount) > $max_amount then 'amount'
                else 'discount'
            end
            when 'unknown_line_kind' then 'line_kind'
            when 'timestamp_out_of_range' then 'sold_at'
            when 'non_positive_quantity' then 'quantity'
            when 'negative_amount' then 'amount'
            when 'return_not_negative' then 'quantity'
            when 'unknown_store' then 'store'
            when 'unknown_sku' then 'sku'
        end as reason_field,
    from flagged
),

final as (
    select
        ordinal,
        line_no,
        receipt,
        line,
        store,
        sold_at,
        sku,
        quantity,
        amount,
        coalesce(discount, 0) as discount,
        card,
        line_kind,
        reason_field,
        reason,
        case reason
            when 'missing_required_field' then 'empty: ' || concat_ws(', ',
                case when receipt is null then 'receipt' end,
                case when store is null then 'store' end,
                case when sold_at_text is null then 'sold_at' end,
                case when sku is null then 'sku' end,
                case when quantity_text is null then 'quantity' end,
                case when amount_text is null then 'amount' end)
            -- values are quoted only when no card column is mapped ($values_shown): a card id
            -- can sit in any field of a line that has one
            when 'unparseable_field' then concat_ws('; ',
                case when line_text is not null and line is null
                    then ingest_problem('line', 'not a whole number', line_text, $values_shown) end,
                case when sold_at is null
                    then ingest_problem('sold_at', 'not a timestamp', sold_at_text, $values_shown) end,
                case when quantity is null
                    then ingest_problem('quantity', 'not a number', quantity_text, $values_shown) end,
                case when amount is null
                    then ingest_problem('amount', 'not a number', amount_text, $values_shown) end,
                case when discount_text is not null and discount is null
                    then ingest_problem('discount', 'not a number', discount_text, $values_shown) end)
            when 'value_out_of_range' then reason_field || ': beyond the sources.receipts bounds'
            when 'unknown_line_kind' then ingest_problem(
                'line_kind', 'not sale, return or void', line_kind, $values_shown)
            when 'timestamp_out_of_range' then ingest_problem(
                'sold_at', 'before valid_from or after valid_to',
                strftime(sold_at, '%Y-%m-%d %H:%M:%S'), $values_shown)
            when 'non_positive_quantity' then ingest_problem(
                'quantity', 'zero or less on a sale', quantity_text, $values_shown)
            when 'negative_amount' then ingest_problem(
                'amount', 'negative on a sale', amount_text, $values_shown)
            when 'return_not_negative' then concat_ws('; ',
                case when quantity >= 0 then ingest_problem(
                    'quantity', 'not negative on a return', quantity_text, $values_shown) end,
                case when amount > 0 then ingest_problem(
                    'amount', 'positive on a return', amount_text, $values_shown) end)
            when 'unknown_store' then ingest_problem(
                'store', 'not in the stores table', store, $values_shown)
            when 'unknown_sku' then ingest_problem(
                'sku', 'not in the catalogue', sku, $values_shown)
        end as detail,
    from classified
)

select
    ordinal,
    line_no,
    receipt,
    line,
    store,
    sold_at,
    sku,
    quantity,
    amount,
    discount,
    card,
    line_kind,
    reason_field,
    reason,
    detail,
from final
