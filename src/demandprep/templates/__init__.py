"""Config templates shipped with the package."""
