"""The version of geonorm (kept in one place; the package and its reports read it)."""

__version__ = "0.1.0"
