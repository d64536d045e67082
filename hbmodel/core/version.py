"""The package version (kept in the lowest room so that every room can stamp its outputs with it)."""
__version__ = "0.1.0"
