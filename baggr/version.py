"""The version of baggr (one place: the package, model files and run directories read it)."""
__version__ = "0.1.0"
