"""The version of comparo (one place; the package and every output read it here)."""

__version__ = "0.1.0"
