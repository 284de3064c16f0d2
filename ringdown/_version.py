"""The package version, single source for pyproject.toml and every record ringdown writes."""

__version__ = "0.1.0"
