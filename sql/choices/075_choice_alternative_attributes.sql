-- Firm, nest and characteristics of each inside alternative (smallest value over its SKUs, so
-- the result never depends on row order). The composite fringe and the outside option have none.
create or replace table choice_alternative_attributes as

with

catalogue_attributes as (
    select
        cast(sku as varchar) as catalogue_sku,
        cast(columns(lambda c: c = $firm_column) as varchar) as firm,
        case
            when $has_nest then cast(columns(lambda c: c = $nest_column) as varchar)
        end as nest,
        -- the original sku column comes along so the selection is never empty
        columns(lambda c: list_contains($characteristics, c) or c = 'sku'),
    from catalogue
),

kept_skus as (
    select sku, alternative from choice_alternative_map where kept
),

final as (
    select
        kept_skus.alternative,
        min(columns(lambda c: list_contains($alternative_columns, c))),
    from catalogue_attributes
    join kept_skus on kept_skus.sku = catalogue_attributes.catalogue_sku
    group by kept_skus.alternative
)

-- alternative, firm, nest and the characteristics
select columns(lambda c: c = 'alternative' or list_contains($alternative_columns, c)) from final;
