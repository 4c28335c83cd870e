"""The one place the version is defined."""

__version__ = "0.1.0"
