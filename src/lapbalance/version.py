"""The lapbalance version (one place; the package, the CLI and every provenance record read it)."""

__version__ = "0.1.0"
