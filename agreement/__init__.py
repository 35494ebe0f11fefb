"""Inter-rater reliability: pairing coders' observations, kappa, alpha, CIs, report.

Never imports observer_app or Qt; imports only ``sync.errors`` from sync.
Column contracts: ``agreement/tables.py``.
"""
