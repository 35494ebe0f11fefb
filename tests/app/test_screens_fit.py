"""Every screen fits the screens coders carry, at display scaling 1, 1.25 and 1.5, without scrolling.

Sizes: 1280x800 and 1366x768 (common small laptops) and 1920x1080 (common practice);
scaling 1.25 and 1.5 of a 1920x1080 display (1536x864 and 1280x720 logical pixels).
Each scaling runs in its own process, since Qt reads QT_SCALE_FACTOR once at start.
The study: the demo with a 35-learner roster and 40-character Latin, Cyrillic and
Greek labels (tests/app/layout_walk.py says what "fits" means).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel

from observer_app.coding.clock import FakeClock
from observer_app.ui.main_window import MainWindow
from tests.app.layout_walk import make_crowded_study, problems
from tests.conftest import ROOT

SCREENS = {"welcome", "overview", "start form", "start form, replay plan", "clock check", "observing", "observing, unknown key",
           "observing, paused", "observing, key list", "end of session", "replay", "clock check, paired",
           "observing, waiting for the signal"}
RUNS = {"1": ["1280x800", "1366x768", "1920x1080"], "1.25": ["1920x1080"], "1.5": ["1920x1080"]}


@pytest.fixture(scope="module")
def crowded(tmp_path_factory):
    return make_crowded_study(tmp_path_factory.mktemp("crowded") / "study")


def test_every_screen_fits_at_every_size_and_scaling(crowded):
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen",
               PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    running = {scale: subprocess.Popen([sys.executable, "-m", "tests.app.layout_walk", str(crowded), *sizes],
                                       stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT,
                                       env=dict(env, QT_SCALE_FACTOR=scale))
               for scale, sizes in RUNS.items()}
    failures = {}
    for scale, process in running.items():
        out, err = process.communicate(timeout=240)
        assert process.returncode == 0, err[-3000:]
        report = json.loads(out)
        assert set(report) == set(RUNS[scale])
        for size, screens in report.items():
            assert set(screens) == SCREENS, (scale, size, set(screens))
            failures.update({f"{size} at {scale}: {screen}": found for screen, found in screens.items() if found})
    assert failures == {}


def test_the_fit_check_catches_a_label_that_does_not_fit(qtbot, crowded):
    window = MainWindow(crowded, clock=FakeClock(), device="laptop-1")
    qtbot.addWidget(window)
    window.resize(1280, 800)
    window.show()
    qtbot.waitExposed(window)
    assert problems(window, 1280, 800) == []
    squeezed = QLabel("Стенд 12 — северный учебный центр, ряд 3", window.overview)
    squeezed.setGeometry(10, 10, 60, 20)
    squeezed.show()
    window.overview.keys_label.hide()
    found = problems(window, 1280, 800)
    assert any("text does not fit" in line and "Стенд 12" in line for line in found)
    assert "no key-hint line visible" in found


def test_tables_scroll_with_the_keyboard(qtbot, crowded):
    window = MainWindow(crowded, clock=FakeClock(), device="laptop-1")
    qtbot.addWidget(window)
    window.resize(1280, 800)
    window.show()
    qtbot.waitExposed(window)
    table = window.overview.counts_table
    assert table.rowCount() == 36  # the All row and 35 learners
    down, sideways = table.verticalScrollBar(), table.horizontalScrollBar()
    assert down.maximum() > 0 and sideways.maximum() > 0
    qtbot.keyClick(window.overview, Qt.Key.Key_PageDown)
    qtbot.keyClick(window.overview, Qt.Key.Key_Right)
    assert down.value() > 0 and sideways.value() > 0
    qtbot.keyClick(window.overview, Qt.Key.Key_End)
    assert down.value() == down.maximum()
    sessions = window.overview.sessions_table.verticalScrollBar()
    qtbot.keyClick(window.overview, Qt.Key.Key_PageDown, Qt.KeyboardModifier.ShiftModifier)
    assert sessions.value() > 0
