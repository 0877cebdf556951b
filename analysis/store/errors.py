"""The store's error class."""

from analysis.errors import AnalysisError

__all__ = ["StoreError"]


class StoreError(AnalysisError):
    """The store cannot be opened, read or written: names the store (URL without password) and the reason."""
