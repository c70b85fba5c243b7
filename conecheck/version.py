"""The package version (also in pyproject.toml; a test keeps the two equal)."""

__version__ = "0.1.0"
