"""nightcell host package: sync, store, analysis and reports for the nightcell colorimeter logger."""

__version__ = "0.1.0"

__all__ = ["__version__"]
