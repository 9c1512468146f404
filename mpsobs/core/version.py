"""The package version (one place; the package namespace re-exports it)."""

__version__ = "0.1.0"
