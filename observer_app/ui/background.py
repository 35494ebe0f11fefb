"""Long work off the UI thread, its answer handed back on the UI thread.

A screen that computes on the UI thread stops repainting and ignores keys until it is
done.  ``BackgroundJob`` runs a plain function on Qt's global thread pool and emits
``finished(result)`` or ``failed(error)`` on the UI thread, where the screen's slots run.
The job has no Qt parent and keeps itself alive until its answer is delivered, so a
screen closed before then simply misses the answer (Qt drops a connection whose
receiver was deleted) and nothing reaches a deleted widget.

The function runs on another thread: it must not touch widgets, nor the UI thread's
sqlite3 connection (a connection belongs to the thread that made it; open a new one).
"""
from __future__ import annotations

from collections.abc import Callable
from functools import partial

from PySide6.QtCore import QObject, QThreadPool, QTimer, Signal

_RUNNING: set[BackgroundJob] = set()  # jobs whose answer has not been delivered yet


class BackgroundJob(QObject):
    """One call of ``work`` on the thread pool; start it with ``start()``."""

    finished = Signal(object)  # what ``work`` returned
    failed = Signal(object)  # the exception ``work`` raised (its __traceback__ says where)
    _answered = Signal(bool, object)  # emitted on the worker thread, delivered on the job's (UI) thread

    def __init__(self, work: Callable[[], object]) -> None:
        super().__init__()
        self._work = work
        self._answered.connect(self._deliver)

    def start(self) -> None:
        _RUNNING.add(self)
        QThreadPool.globalInstance().start(self._run)

    def _run(self) -> None:
        try:
            result = self._work()
        except Exception as error:  # handed to the UI thread, which shows and logs it
            self._answered.emit(False, error)
        else:
            self._answered.emit(True, result)

    def _deliver(self, succeeded: bool, value: object) -> None:
        try:
            (self.finished if succeeded else self.failed).emit(value)
        finally:
            # Let go on the next turn of the event loop, not while Qt is still delivering to this object.
            QTimer.singleShot(0, partial(_RUNNING.discard, self))


def wait_for_background_work() -> None:
    """Block until the thread pool is idle: the window is closing and Python must not exit under a job."""
    QThreadPool.globalInstance().waitForDone()
