"""Learning-system logs, clock models and observation windows on the log's clock.

Never imports observer_app or Qt.  Column contracts: ``sync/tables.py``.
"""
