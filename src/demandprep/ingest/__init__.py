"""Ingest: raw files into the warehouse, with quarantine and ledger."""
