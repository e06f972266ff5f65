"""The package version, in a leaf module so that any layer may quote it."""

__version__ = "0.1.0"
