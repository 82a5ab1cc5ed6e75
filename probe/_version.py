"""The package version, in a module of its own so that nothing imports the package root for it."""

__version__ = "0.1.0"
