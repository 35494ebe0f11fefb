"""Labelled, de-identified windows for detector training, and the detector check.

Never imports observer_app or Qt.  Column contracts: ``export/tables.py``.
``export.load_windows(path) -> (X, y, groups)`` is the entry point for data scientists.
"""
from __future__ import annotations

__all__ = ["load_windows"]


def __getattr__(name: str):
    """``export.load_windows`` without loading pyarrow for callers that only need pseudonyms."""
    if name == "load_windows":
        from export.reader import load_windows

        return load_windows
    raise AttributeError(f"module 'export' has no attribute {name!r}")
