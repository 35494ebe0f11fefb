"""The ``fieldmark`` command line: one verb per job, exit codes as in DESIGN.md.

Each verb lives in ``observer_app/commands/<verb>.py`` with ``add_parser(subparsers)``
and ``run(args) -> int``.  This module only dispatches and turns a user's mistake
(``InputError``) into one stderr line and exit 2.
"""
from __future__ import annotations

import argparse
import importlib
import sys

from observer_app import __version__
from sync.errors import InputError

# Verb modules in the order --help lists them.  Only verbs that work are listed.
COMMANDS: tuple[str, ...] = (
    "init",
    "app",
    "import_observations",
    "align",
    "agree",
    "adjudicate",
    "plan",
    "check",
    "demo",
)


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage mistakes as one line and exit 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        sys.stderr.write(f"{self.prog}: {message} (see {self.prog} --help)\n")
        raise SystemExit(2)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="fieldmark",
        description="Field observation and ground-truth labelling synchronised with learning-system logs.",
    )
    parser.add_argument("--version", action="version", version=f"fieldmark {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        module = importlib.import_module(f"observer_app.commands.{name}")
        module.add_parser(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "run", None):
        parser.print_help()
        return 2
    try:
        return int(args.run(args) or 0)
    except InputError as error:
        sys.stderr.write(f"fieldmark {args.command}: {error.line()}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("fieldmark: interrupted\n")
        return 130
