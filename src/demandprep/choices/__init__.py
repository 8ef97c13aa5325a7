"""The chooser-alternative build: card visits -> one row per choice occasion and alternative.

Stages (demandprep.choices.stages) run static SQL from sql/choices/ in DuckDB, out of core, and
write `choices` and `choosers` (pandera models in demandprep.schemas.choices). Each step has
one SQL file, run for every config: an optional table that is absent (households, shelf prices,
the market build's product_universe and market_skus) reads as an empty TEMP view
`choice_input_<table>` (demandprep.choices.inputs), an absent shelf promo or store region column
as all null, and the market build's SKU ids are used when they exist ($from_market). Decisions:

- Chooser: a loyalty card, pseudonymised as HMAC-SHA256(key, card) (32 hex digits); the key
  comes from the environment variable choices.pseudonym_key_env and the build refuses to run
  without it or with one shorter than 16 bytes. The card -> chooser map is a TEMP table (it
  dies with the connection, even when the build does), and choice_visits swaps its card for the
  chooser as soon as the map exists, so no persistent table links the two.
- Occasion: a visit with a card and a sale line. A visit has the market build's identity
  (markets.receipt_ids_unique_per): store, business day and receipt by default; store and
  receipt with 'store' or 'chain' (an occasion happens in one store, so a chain-unique id seen
  in two stores stays two visits here). Its id is the visit's day and a keyed hash of that
  identity (YYYY-MM-DD ':' HMAC-SHA256 with the same key over "occasion" NUL store NUL
  [day NUL] receipt, 32 hex digits; the label keeps it apart from chooser hashes), so it cannot
  be matched to the till's record without the key, stays the same on every rebuild and sorts
  by day. With occasions =
  'category_visits' only visits that bought an alternative; with 'all_visits' every visit,
  choosing `none` when it bought none (`none` is in every set). Void lines net against their
  sale; returns are not choices.
- Alternatives: products (catalogue keys joined with '|', the market build's ids) kept by the
  market build's product universe; the others become the composite `fringe` when
  products.universe.rest = 'fringe', or count as no purchase when it is 'outside'.
- Several alternatives in one visit: 'largest_spend' (ties: quantity, then id), 'split' (one
  occasion `<visit id>/n` per product, n by spend; each weighs 1/n in loyalty), 'drop' (the
  visit is no occasion and leaves no history).
- Choice set: the store's latest shelf-price snapshot on or before the day (if younger than
  choice_set_window_days), else the alternatives the store sold on the choice_set_window_days
  days before. The chosen alternative is added when missing (added_to_set, counted).
- Price: shelf price, else the store-period median net unit price, else the store's last
  observed price within price_window_days, else the regional median (stores.region, else the
  whole chain); price_source says which. Store-period prices are facts of the whole period,
  like a weekly shelf price.
- History, from earlier visits only: previous_choice (bought at the latest earlier category
  purchase), purchase_count, days_since_last_purchase, and Guadagni & Little (1983) loyalty.
  Loyalty starts from the chooser's purchase shares during the first loyalty_burn_in_days days
  after their first occasion (zero without a burn-in purchase); occasions in that window are
  flagged burn_in and have no loyalty. The recursion is computed in closed form in blocks
  (sql/choices/047_choice_loyalty_events.sql), exact to about 1e-260.
- Sampling (choices.sampled_alternatives = K): the chosen alternative plus K others drawn
  uniformly without replacement, ordered by md5(occasion, alternative) so every rebuild draws
  the same (McFadden 1978).
- Holdout: a second keyed hash of the chooser read as a uniform number < holdout_fraction.
- Order and checks: `choices` is stored in (occasion, alternative) order without sorting its
  rows (occasions sorted in 062, unnested without a join in 090), so the export writes it as
  stored; every check of its pandera model runs on every row as SQL (091), the model itself
  on a sample of whole occasions (demandprep.choices.validation).
"""
