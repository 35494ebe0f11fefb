"""Study folders and sessions for the app tests (scenario: panel-wiring benches)."""
from __future__ import annotations

from pathlib import Path

import pytest

from observer_app.coding.clock import FakeClock
from observer_app.study.store import Store
from observer_app.study.folder import load_study
from observer_app.study.creation import create_study

ROSTER = "learner,label,log_id,site\n" + "".join(
    f"L{n:02d},Bench {n},n-{n:04d},north\n" for n in range(1, 7))


def make_study(folder: Path, *, order: str = "fixed", window: int = 20) -> Path:
    """A study from the init templates with a six-bench roster and the given schedule."""
    create_study(folder)
    (folder / "roster.csv").write_text(ROSTER, encoding="utf-8")
    text = (folder / "study.toml").read_text(encoding="utf-8")
    text = text.replace("window_seconds = 20", f"window_seconds = {window}")
    text = text.replace('order = "shuffled"', f'order = "{order}"')
    (folder / "study.toml").write_text(text, encoding="utf-8")
    return folder


@pytest.fixture
def study(tmp_path):
    return load_study(make_study(tmp_path / "study"))


@pytest.fixture
def store(study):
    with Store(study.store_path) as opened:
        yield opened


@pytest.fixture
def clock():
    return FakeClock()


def replay_start_form(qtbot, folder: Path, coder: str = "rhea"):
    """A MainWindow on ``folder`` showing the start form, the coder typed and replay chosen
    (not yet submitted): (window, form)."""
    from observer_app.ui.main_window import MainWindow
    from observer_app.ui.start_form import REPLAY

    window = MainWindow(folder, clock=FakeClock(), device="laptop-r")
    qtbot.addWidget(window)
    window.show()
    qtbot.waitExposed(window)
    qtbot.keyClick(window.page, "s")
    form = window.page
    qtbot.keyClicks(form.coder, coder)
    form.mode.setCurrentText(REPLAY)
    return window, form
