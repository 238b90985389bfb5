"""The version of sensiv (also in ``pyproject.toml``)."""

__version__ = "0.1.0"
