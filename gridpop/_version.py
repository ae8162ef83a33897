"""The version of gridpop: the one place it is set (pyproject.toml reads it from here)."""

__version__ = "0.1.0"
