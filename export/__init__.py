"""Labelled, de-identified windows for detector training, and the detector check.

Never imports observer_app or Qt.  Column contracts: ``export/tables.py``.
"""
from export.writer import load_windows

__all__ = ["load_windows"]
