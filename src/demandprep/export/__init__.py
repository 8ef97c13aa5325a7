"""Build folders: Parquet, manifest, data dictionary, report."""
