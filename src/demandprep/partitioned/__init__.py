"""Partitioned builds: the market scans per partition on a Dask cluster, the rest in a reduce.

Design choices, written down once (docs/scaling.md has the numbers):
- a partition is one value of a stores column (`partitioning.by`, e.g. region), from the stores
  file, plus one partition for stores without a value, optionally split into period ranges
  (`partitioning.period_boundaries`, each a period start); the markets' geography must lie
  within one partition (checked), and receipt ids must be unique per store or store-day (per
  store-day with period ranges) so that a visit never spans partitions;
- files are routed: each partition ingests, through the ordinary ingest into its own warehouse
  (`<partitioning.root>/<name>/`), only the receipts files holding lines of its stores and days
  (and those it read before), then keeps only its own lines; so a partition is exactly the
  lines of its stores and days, whatever the file layout, and reads a file only if it holds them;
- the coordinator ingests every file once: the ledger and the quarantine are its own (a line is
  counted there once), and the reduce checks that each file's accepted lines are in exactly
  one partition;
- the map step (`map.py`) runs the single-process build's own stages up to the two period
  summaries (`050`/`060`), incremental per partition as on one machine, and writes the
  summaries as Parquet beside its warehouse on storage every worker sees;
- a partition whose inputs (config, routed files, reference files, summary SQL) did not change
  since its last map is not mapped again: its summary files are reused;
- the reduce (`reduce.py`) runs on the coordinator warehouse (the configured one):
  it loads the partitions' summaries in place of the scans, then runs every later stage
  unchanged (product universe, Hausman means, spreads, sizes, instruments) and the choice build,
  whose chooser histories cross partitions;
- nothing is published unless every partition finished: the export runs after the reduce.
"""
