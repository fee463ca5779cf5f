"""The package version, recorded in every trace and report."""
__version__ = "0.1.0"
