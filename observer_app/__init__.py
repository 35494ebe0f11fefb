"""The ``fieldmark`` command and desktop app: study folder, scheme, roster, schedule, store."""

__version__ = "0.1.0"
