"""Price instruments for the share table and the first-stage strength of the chosen set.

Reads `market_products`, `stores`, `cost_shifters` and `shares`; writes, in stage order:
`iv_products` and `iv_characteristic_values` (inputs), `iv_build_periods` (the periods this
build computes, `periods.py`), the long tables `instrument_values` and `instrument_flags` (one
row per product-market, period and iv_ column, appended by each family), merged into the kept
`iv_stored_values` / `iv_stored_flags`, `instruments` (wide: market, product, iv_*, pivoted from
the stored rows), `instrument_columns` (catalogue of the iv_ columns) and `share_table` (shares
left join instruments). Facts: ctx.facts["first_stage"],
ctx.facts["instrument_columns"], ctx.facts["hausman_missing"], ctx.facts["instrument_scope"].

Choices made here:
- the composite fringe product gets no instruments and is nobody's rival or sibling: its price
  and characteristics average many small products;
- zero-sale rows of market_products (kept when shares.zero_shares is not 'drop') are ordinary
  product-markets: their (shelf) price counts in other markets' Hausman means;
- characteristics used by an instrument must be numeric or boolean (0/1) and complete;
- iv_ column names are fixed prefixes + checked config identifiers; the SQL stays static by
  working on a long (market, product, name, value) form and pivoting at the end.
"""
