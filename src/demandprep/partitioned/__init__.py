"""Partitioned builds: the market scans per partition on a Dask cluster, the rest in a reduce.

Design choices, written down once (docs/scaling.md has the numbers):
- a partition is one value of a stores column (`partitioning.by`, e.g. region), plus one
  partition for stores that have no value or no row in the stores file; the markets' geography
  must lie within one partition (checked), and receipt ids must be unique per store or store-day
  so that a visit never spans partitions;
- files map to partitions by the store of each line, after reading: every partition ingests the
  configured receipts files into its own warehouse (`<partitioning.root>/<name>/`) through the
  ordinary ingest, then keeps only its stores' lines; so a partition is exactly the lines of
  its stores, whatever the file layout;
- the map step (`map.py`) runs the single-process build's own stages up to the two period
  summaries (`050`/`060`), incremental per partition as on one machine, and writes the
  summaries as Parquet beside its warehouse on storage every worker sees;
- the reduce (`reduce.py`) runs on the coordinator warehouse (the configured one, which the
  coordinator ingests itself: it keeps the ledger, the quarantine and the choosers' lines):
  it loads the partitions' summaries in place of the scans, then runs every later stage
  unchanged (product universe, Hausman means, spreads, sizes, instruments) and the choice build,
  whose chooser histories cross partitions;
- nothing is published unless every partition finished: the export runs after the reduce.
"""
