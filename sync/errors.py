"""The one error type for a user's mistake in an input file or option, and its
warning twin for what a person should see but need not stop the work.

Raised at the boundary (loaders, command line); the CLI turns it into a single
stderr line and exit code 2.  It lives in sync/ because sync is the bottom of the
dependency graph: every other package may import it.
"""
from __future__ import annotations

from pathlib import Path


class InputError(Exception):
    """A problem the user can fix: which file, where in it, and what to do."""

    def __init__(self, file: str | Path | None, where: str | None, message: str) -> None:
        self.file = str(file) if file is not None else None
        self.where = where
        self.message = message
        super().__init__(self.line())

    def __reduce__(self):
        # So that an error raised in a worker process arrives whole in the parent.
        return (InputError, (self.file, self.where, self.message))

    def line(self) -> str:
        """One line: ``file: where: message`` with the empty parts left out."""
        parts = [p for p in (self.file, self.where) if p]
        return ": ".join(parts + [self.message])


class InputWarning(UserWarning):
    """Something in an input a person should see but that need not stop the work (a roster
    line without a log_id, two learners on one log id); the CLI prints each once, as a note
    after a successful run."""
