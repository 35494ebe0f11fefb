"""Walks every screen of the app at a window size and reports what does not fit.

Run as a script (``python -m tests.app.layout_walk STUDY WIDTHxHEIGHT...``) so each
display scaling (``QT_SCALE_FACTOR``, read once when Qt starts) gets its own process;
prints one JSON object: {"WIDTHxHEIGHT": {"screen": [problem, ...]}}.  Sizes are
physical pixels; the window is given the logical size (physical / scale), as a
full-screen window on that display would be.

A screen fits when: the window did not have to grow beyond the size asked for;
every visible widget lies inside the window; every visible label's text fits its
widget (wrapped labels: the height their text needs at their width); and the key-hint
line (the label naming the keys) is visible.
"""
from __future__ import annotations

import csv
import json
import time
import os
import shutil
import sys
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

from PySide6.QtCore import QPoint, QRect, Qt  # noqa: E402
from PySide6.QtTest import QTest  # noqa: E402
from PySide6.QtWidgets import QAbstractScrollArea, QApplication, QLabel, QWidget  # noqa: E402

from demo_sessions import committed_copy  # noqa: E402
from observer_app.coding.clock import FakeClock  # noqa: E402
from observer_app.ui.main_window import MainWindow  # noqa: E402
from observer_app.ui.replay import ReplayScreen  # noqa: E402
from observer_app.ui.start_form import REPLAY, StartChoice  # noqa: E402

# 40 characters each with the learner's number, Latin with diacritics, Cyrillic and Greek
# (DejaVu Sans covers all three); every learner gets one, so every screen shows them.
LONG_LABELS = ("Station {:02d} – Nordwerkstatt, Reihe Fenste", "Стенд {:02d} — северный учебный центр, ряд 3",
               "Πάγκος {:02d} — νότιο κέντρο εκπαίδευσης, Β4")


def make_crowded_study(folder: Path) -> Path:
    """The demo study with a 35-learner roster and 40-character, non-Latin labels."""
    shutil.copytree(committed_copy(), folder)
    with (folder / "roster.csv").open(encoding="utf-8", newline="") as handle:
        header, *rows = list(csv.reader(handle))
    rows += [[f"L{n:02d}", f"Bench {n}", f"x-{n:04d}", "north", "B"] for n in range(len(rows) + 1, 36)]
    for number, row in enumerate(rows, start=1):
        row[1] = LONG_LABELS[number % len(LONG_LABELS)].format(number)
    with (folder / "roster.csv").open("w", encoding="utf-8", newline="") as handle:
        csv.writer(handle).writerows([header, *rows])
    scheme = (folder / "scheme.toml").read_text(encoding="utf-8")
    scheme = scheme.replace('label = "Rapid trial and error"', 'label = "Rapid trial and error at the breaker row"')
    scheme = scheme.replace('label = "Confused"', 'label = "Растерян: ищет схему подключения щита"')
    (folder / "scheme.toml").write_text(scheme, encoding="utf-8")
    return folder


def _inside(widget: QWidget, window: QWidget) -> bool:
    top_left = widget.mapTo(window, QPoint(0, 0))
    return window.rect().contains(QRect(top_left, widget.size()))


def _clipped_by_scroller(widget: QWidget) -> bool:
    """Widgets inside a scrolling viewport (table cells, list rows) may lie outside it."""
    parent = widget.parentWidget()
    while parent is not None:
        if isinstance(parent, QAbstractScrollArea):
            return True
        parent = parent.parentWidget()
    return False


def _text_fits(label: QLabel) -> bool:
    if label.wordWrap():
        needed = label.heightForWidth(label.width())
        return (needed if needed >= 0 else label.sizeHint().height()) <= label.height() + 1
    hint = label.sizeHint()
    return hint.width() <= label.width() + 1 and hint.height() <= label.height() + 1


def problems(window: MainWindow, width: int, height: int) -> list[str]:
    found = []
    if window.width() > width or window.height() > height:
        found.append(f"window grew to {window.width()}x{window.height()} (asked {width}x{height})")
    page = window.page
    for widget in [page, *page.findChildren(QWidget)]:
        if not widget.isVisible() or _clipped_by_scroller(widget):
            continue
        name = type(widget).__name__ + (f" {widget.text()[:40]!r}" if isinstance(widget, QLabel) else "")
        if not _inside(widget, window):
            found.append(f"outside the window: {name}")
        if isinstance(widget, QLabel) and widget.text() and not _text_fits(widget):
            found.append(f"text does not fit: {name} ({widget.width()}x{widget.height()}, "
                         f"needs {widget.sizeHint().width()}x{widget.heightForWidth(widget.width())})")
    # The key-hint line: the page's keys_label, or (screens without one) the label naming Enter or Esc.
    hints = [page.keys_label] if hasattr(page, "keys_label") else [
        label for label in page.findChildren(QLabel) if "Enter" in label.text() or "Esc" in label.text()]
    if not any(label.isVisible() and _inside(label, window) and _text_fits(label) for label in hints):
        found.append("no key-hint line visible")
    return found


def settle(app: QApplication) -> None:
    """Process events until no visible widget moves any more (at most ~2 s): on a loaded
    machine a few rounds of events are not always enough for nested layouts to finish, and
    a half-laid-out screen is not what a coder sees."""
    previous = None
    for _ in range(200):
        app.processEvents()
        shape = tuple(widget.geometry().getRect() for widget in app.allWidgets() if widget.isVisible())
        if shape == previous:
            return
        previous = shape
        time.sleep(0.01)


def walk(study: Path, sizes: list[tuple[int, int]], scale: float) -> dict[str, dict[str, list[str]]]:
    app = QApplication.instance() or QApplication([])
    report: dict[str, dict[str, list[str]]] = {}
    for width, height in sizes:
        logical = (round(width / scale), round(height / scale))
        welcome = MainWindow(None, clock=FakeClock(), device="walk-laptop")
        welcome.resize(*logical)
        welcome.show()
        settle(app)
        welcome_problems = problems(welcome, *logical)
        welcome.close()
        window = MainWindow(study, clock=FakeClock(), device="walk-laptop")
        window.resize(*logical)
        window.show()
        settle(app)
        if window.overview is None:
            raise SystemExit(f"the study did not open: {window.welcome.error.text()}")
        screens: dict[str, list[str]] = {"welcome": welcome_problems}

        def look(name: str) -> None:
            window.resize(*logical)
            settle(app)
            screens[name] = problems(window, *logical)
            if os.environ.get("LAYOUT_SHOTS"):
                shot = Path(os.environ["LAYOUT_SHOTS"]) / f"{width}x{height}@{scale:g} {name}.png"
                window.grab().save(str(shot))

        def key(key, text: str | None = None) -> None:
            target = QApplication.focusWidget() or window.page
            if text is not None:
                QTest.keyClicks(target, text)
            else:
                QTest.keyClick(target, key)
            settle(app)

        look("overview")
        key(Qt.Key.Key_S)
        key(None, "ana")
        look("start form")
        window.page.mode.setCurrentText(REPLAY)
        settle(app)
        look("start form, replay plan")
        window.page.mode.setCurrentIndex(0)
        key(Qt.Key.Key_Return)
        look("clock check")
        key(Qt.Key.Key_Return)
        look("observing")
        key(None, "z")
        look("observing, unknown key")
        key(Qt.Key.Key_Space)
        look("observing, paused")
        key(Qt.Key.Key_Space)
        key(Qt.Key.Key_F1)
        look("observing, key list")
        key(Qt.Key.Key_Escape)
        key(None, "1q")
        key(Qt.Key.Key_F10)
        key(Qt.Key.Key_F10)
        look("end of session")
        key(Qt.Key.Key_Return)
        window.start_replay(StartChoice(coder="rhea", device="walk-laptop", paired_start=None,
                                        present=("L01", "L02", "L03"), replay=True))
        for _ in range(2000):  # the logs are read off the UI thread
            if isinstance(window.page, ReplayScreen):
                break
            app.processEvents()
            time.sleep(0.01)
        settle(app)
        look("replay")
        window.show_overview()
        window.start_session(StartChoice(coder="ana", device="walk-laptop", paired_start=None,
                                         present=("L01", "L02", "L03"), pairing_id="KM7QX", signal=True))
        settle(app)
        look("clock check, paired")
        key(Qt.Key.Key_Return)
        look("observing, waiting for the signal")
        window.close()
        window.deleteLater()
        settle(app)
        report[f"{width}x{height}"] = screens
    return report


if __name__ == "__main__":
    study_dir = Path(sys.argv[1])
    sizes = [tuple(int(part) for part in size.split("x")) for size in sys.argv[2:]]
    scale = float(os.environ.get("QT_SCALE_FACTOR", "1"))
    print(json.dumps(walk(study_dir, sizes, scale)))
