"""choices build."""
