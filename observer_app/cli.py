"""The ``fieldmark`` command line: one verb per job, exit codes as in DESIGN.md.

Each verb lives in a module with ``add_parser(subparsers)`` and ``run(args) -> int``:
``observer_app/commands/<verb>.py``, except ``demo``, which lives beside the demo it
builds (``demo_sessions/command.py``).  The registry names modules as text, so
observer_app never imports demo_sessions.  This module only dispatches and turns a
user's mistake (``InputError``) into one stderr line and exit 2.
"""
from __future__ import annotations

import argparse
import importlib
import os
import sys
import warnings

from observer_app import __version__
from sync.errors import InputError, InputWarning

# Verb modules (dotted paths) in the order --help lists them.  Only verbs that work are listed.
COMMANDS: tuple[str, ...] = (
    "observer_app.commands.init",
    "observer_app.commands.app",
    "observer_app.commands.import_observations",
    "observer_app.commands.align",
    "observer_app.commands.agree",
    "observer_app.commands.adjudicate",
    "observer_app.commands.recode",
    "observer_app.commands.plan",
    "observer_app.commands.export",
    "observer_app.commands.check",
    "observer_app.commands.verify",
    "demo_sessions.command",
)


# What --help shows for each verb module, so that help and dispatch import only the
# one module a run needs (the heavy libraries load in a fraction of a second less per
# call, which matters on a coder's laptop).  verb module -> (verb, one-line help).
SUMMARIES: dict[str, tuple[str, str]] = {
    "observer_app.commands.init": ("init", "create a new study folder with commented templates"),
    "observer_app.commands.app": ("app", "the desktop app: live round-robin coding, or coding replayed log clips, with the keyboard"),
    "observer_app.commands.import_observations": ("import", "add observations from another device's store or a CSV"),
    "observer_app.commands.align": ("align", "fit each device's clock model against the logs"),
    "observer_app.commands.agree": ("agree", "inter-rater reliability per dimension, coder pair and session"),
    "observer_app.commands.adjudicate": ("adjudicate", "record adjudicated codes for disagreeing units"),
    "observer_app.commands.recode": ("recode", "record that a coded code was renamed or merged into another"),
    "observer_app.commands.plan": ("plan", "paired observations needed for a kappa interval of a given width"),
    "observer_app.commands.export": ("export", "labelled, de-identified windows (Parquet or CSV) and a manifest"),
    "observer_app.commands.check": ("check", "grouped cross-validated detector check of exported windows, by group and across groups"),
    "observer_app.commands.verify": ("verify", "check the observation store against its hash chain"),
    "demo_sessions.command": ("demo", "build the demo study and run every step on it"),
}


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage mistakes as one line and exit 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        sys.stderr.write(f"{self.prog}: {message} (see {self.prog} --help)\n")
        raise SystemExit(2)


def _summary(module_name: str) -> tuple[str, str]:
    if module_name in SUMMARIES:
        return SUMMARIES[module_name]
    module = importlib.import_module(module_name)
    probe = _Parser(prog="fieldmark").add_subparsers(parser_class=_Parser)
    module.add_parser(probe)
    verb = next(iter(probe.choices))
    return verb, probe._choices_actions[0].help or ""


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The full parser; with ``only`` (a verb), just that verb's module is imported."""
    verbs = {module_name: _summary(module_name) for module_name in COMMANDS}
    parser = _Parser(
        prog="fieldmark",
        description="Field observation and ground-truth labelling synchronised with learning-system logs.",
        epilog="Run `fieldmark COMMAND --help` for a command's options. Exit codes: 0 success, "
               "2 a mistake in the input or the command line (one line on stderr says what to fix), 1 a bug.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"fieldmark {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for module_name, (verb, text) in verbs.items():
        if only is None or verb == only:
            importlib.import_module(module_name).add_parser(subparsers)
        else:
            subparsers.add_parser(verb, help=text, add_help=False)
    return parser


def _run_with_notes(args: argparse.Namespace) -> int:
    """Run the verb; then print each InputWarning it met once, as a note on stderr.

    Notes come after a successful run only: a refused run prints its one error line alone."""
    notes: list[str] = []
    original = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):  # noqa: ANN001 -- warnings' signature
        if issubclass(category, InputWarning):
            if str(message) not in notes:
                notes.append(str(message))
        else:
            original(message, category, filename, lineno, file, line)

    with warnings.catch_warnings():
        warnings.simplefilter("always", InputWarning)
        warnings.showwarning = show
        code = int(args.run(args) or 0)
    for note in notes:
        sys.stderr.write(f"fieldmark {args.command}: note: {note}\n")
    return code


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    chosen = next((a for a in argv if not a.startswith("-")), None)
    known = {verb for verb, _ in map(_summary, COMMANDS)}
    parser = build_parser(only=chosen if chosen in known else "")
    args = parser.parse_args(argv)
    if not getattr(args, "run", None):
        parser.print_help()
        return 2
    from sync.arrow_memory import prefer_jemalloc  # here, not at the top: --help need not load Arrow

    prefer_jemalloc()
    try:
        return _run_with_notes(args)
    except InputError as error:
        sys.stderr.write(f"fieldmark {args.command}: {error.line()}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("fieldmark: interrupted\n")
        return 130
    except BrokenPipeError:
        # The reader went away (`fieldmark agree STUDY | head`): stop quietly, as Unix tools do.
        # Point stdout at devnull so the interpreter's final flush does not raise again.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141
