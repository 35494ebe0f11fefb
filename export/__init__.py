"""Labelled, de-identified windows for detector training, and the detector check.

Never imports observer_app or Qt.  Column contracts: ``export/tables.py``.
"""
