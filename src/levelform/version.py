"""The version of levelform (one place; the package and every record read it)."""

__version__ = "0.1.0"
