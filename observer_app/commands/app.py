"""``fieldmark app [STUDY]``: the desktop app for live coding and replay coding.

The study folder is validated before any window opens, so a mistake in it is one
line and exit 2 like every other verb.  So is a computer that cannot show the window
(missing system libraries, no display): Qt would abort the process instead.  Qt is
imported only when the app runs.
"""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from observer_app.study.folder import load_study
from observer_app.ui.system_libraries import display_problem
from sync.errors import InputError


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "app", help="the desktop app: live round-robin coding, or coding replayed log clips, with the keyboard",
        description="Open the desktop app. With STUDY it opens that study folder; without, it asks for one "
                    "or creates a new one. Everything works from the keyboard; F1 lists the keys.")
    parser.add_argument("study", type=Path, nargs="?", help="study folder (default: choose in the app)")
    parser.add_argument("--device", help="device label stored with each session (default: the computer's name)")
    parser.add_argument("--discreet", action="store_true", help="start in discreet mode (dark, low glare)")
    parser.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    if args.study is not None:
        load_study(args.study)
    problem = display_problem(os.environ)
    if problem:
        raise InputError("fieldmark app", None, problem)
    from PySide6.QtWidgets import QApplication

    from observer_app.ui.main_window import MainWindow
    from observer_app.ui.slot_errors import report_slot_errors

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("fieldmark")
    window = MainWindow(args.study, device=args.device, discreet=args.discreet)
    report_slot_errors(window)
    window.show()
    return int(app.exec())
