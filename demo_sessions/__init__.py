"""Seeded generator of the demo study: apprentice electricians on a panel-wiring simulator."""
