"""No silent failure: an exception raised in any Qt slot or event handler is shown and logged.

PySide6 hands an exception escaping a slot to ``sys.excepthook`` and carries on, so by
default the coder sees nothing and the terminal (if any) gets a traceback.  The app
installs ``report_slot_errors``: the window shows one line saying what failed, and
the whole traceback is appended to ``app-errors.log`` in the study folder.  The log
may hold learner labels, so it is readable by its owner only (0o600), like the
pseudonym key.  Codes already saved are safe: every code is durable before it shows.
"""
from __future__ import annotations

import os
import sys
import traceback
from datetime import datetime, timezone
from pathlib import Path
from types import TracebackType

ERROR_LOG = "app-errors.log"


def error_line(error: BaseException) -> str:
    """What failed, in one line: the error's type and the first line of its message."""
    text = str(error).strip().splitlines()
    return f"{type(error).__name__}: {text[0]}" if text else type(error).__name__


def append_error_log(folder: Path, error: BaseException, trace: TracebackType | None) -> Path:
    """Append the time and the whole traceback to ``folder/app-errors.log`` (owner-only); its path."""
    path = folder / ERROR_LOG
    stamp = datetime.now(timezone.utc).isoformat(timespec="seconds")
    text = "".join(traceback.format_exception(type(error), error, trace))
    descriptor = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o600)
    try:
        os.fchmod(descriptor, 0o600)  # also narrows a log made before this rule existed
        os.write(descriptor, f"--- {stamp}\n{text}\n".encode("utf-8"))
    finally:
        os.close(descriptor)
    return path


def report_slot_errors(window) -> None:
    """Route every uncaught exception to ``window.show_error`` (the MainWindow)."""
    previous = sys.excepthook

    def hook(kind: type[BaseException], error: BaseException, trace: TracebackType | None) -> None:
        if issubclass(kind, KeyboardInterrupt):
            previous(kind, error, trace)
            return
        try:
            window.show_error(error, trace)
        except Exception:  # the window itself is broken: fall back to the terminal
            previous(kind, error, trace)

    sys.excepthook = hook
