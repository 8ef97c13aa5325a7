"""instruments build."""
