"""The tool's version: the one place it is declared (``pyproject.toml`` reads it from here)."""

__version__ = "0.1.0"
