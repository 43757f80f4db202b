"""The package version, in one place (reports, files and the command line name it)."""

__version__ = "0.1.0"
