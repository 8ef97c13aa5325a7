"""market build."""
