"""The command line itself: --help, --version, exit codes, no traceback for usage mistakes."""
from __future__ import annotations

import os
import shutil
import subprocess

from observer_app import __version__
from tests.conftest import assert_user_error, call_cli, run_cli


def test_help_lists_only_working_commands() -> None:
    from observer_app.cli import COMMANDS, SUMMARIES
    result = run_cli("--help")
    assert result.returncode == 0
    for module in COMMANDS:
        verb, _ = SUMMARIES[module]
        assert verb in result.stdout.split()


def test_version() -> None:
    result = call_cli("--version")
    assert result.returncode == 0 and __version__ in result.stdout


def test_unknown_command_and_missing_arguments_exit_2_with_one_line() -> None:
    assert_user_error(call_cli("frobnicate"), "invalid choice")
    assert_user_error(call_cli("import"), "required")


def test_installed_console_script_when_present() -> None:
    # CI installs the project; the console script must then be the same program
    script = shutil.which("fieldmark")
    if script is None:
        assert not os.environ.get("CI"), "CI installs fieldmark, so its console script must be on PATH"
        return
    assert subprocess.run([script, "--version"], capture_output=True, text=True).stdout.strip().endswith(__version__)
