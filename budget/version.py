"""The package version, in a module that imports nothing (so ``budget --help`` stays light)."""

__version__ = "0.1.0"
