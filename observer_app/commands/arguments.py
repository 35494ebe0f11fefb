"""Arguments many verbs share, worded once: the study folder and ``--json``."""
from __future__ import annotations

import argparse
from pathlib import Path


def study_argument(parser: argparse.ArgumentParser, help: str = "the study folder") -> None:
    """The STUDY positional argument (a path)."""
    parser.add_argument("study", type=Path, metavar="STUDY", help=help)


def json_option(parser: argparse.ArgumentParser) -> None:
    """``--json``: the verb prints one JSON object to stdout instead of text."""
    parser.add_argument("--json", action="store_true", help="print one JSON object")
