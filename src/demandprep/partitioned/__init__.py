"""Partitioned builds: the market scans per partition on a Dask cluster, the rest in a reduce.

Design choices, written down once (docs/scaling.md has the numbers):
- a partition is one value of a stores column (`partitioning.by`, e.g. region), from the stores
  file, plus one partition for stores without a value, optionally split into period ranges
  (`partitioning.period_boundaries`, each a period start); the markets' geography must lie
  within one partition (checked), and receipt ids must be unique per store or store-day (per
  store-day with period ranges) so that a visit never spans partitions;
- the coordinator reads no receipt line: it ingests the reference files only, and routes each
  receipts file (`routing.py`) to the partitions it fed before, those the partitions' reports
  place its lines in, and, for a version no partition has read, those a scan of its store and
  sale-time columns names; each partition ingests its routed files through the ordinary ingest
  into its own warehouse (`<partitioning.root>/<name>/`), reports per file the accepted lines
  of every partition, then keeps only its own; a file whose lines a report places in a
  partition that did not read it is routed there in a second round (a wrong hint costs time,
  never lines);
- the coordinator's receipts ledger and quarantine are assembled from the partitions'
  (`receipts_ledger.py`: accepted = the sum of the lines each kept, quarantined = the union by
  line, so a line is counted once), and the reduce checks that each file's accepted lines are
  in exactly one partition;
- the map step (`map.py`) runs the single-process build's own stages up to the two period
  summaries (`050`/`060`), incremental per partition as on one machine, and writes the
  summaries as Parquet beside its warehouse on storage every worker sees;
- a partition whose inputs (config, routed files, reference files, summary SQL) did not change
  since its last map is not mapped again: its summary files are reused;
- the reduce (`reduce.py`) runs on the coordinator warehouse (the configured one):
  it loads the partitions' summaries in place of the scans, then runs every later stage
  unchanged (product universe, Hausman means, spreads, sizes, instruments);
- the choice build, whose chooser histories cross partitions, is a second map by chooser
  bucket (`choice_reduce.py`, `buckets.py`): each bucket task runs the choice stages unchanged
  in its own warehouse, reading the partitions' lines in place (attached read-only behind a
  temporary `raw_lines` view, `attached.py`) narrowed to its choosers' visits, and the
  coordinator loads the buckets' tables sorted by key;
- nothing is published unless every partition and bucket finished: the export runs after the
  reduce.
"""
