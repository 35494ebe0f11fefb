"""The command line itself: --help, --version, exit codes, no traceback for usage mistakes."""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from observer_app import __version__
from tests.conftest import assert_user_error, call_cli, run_cli


def test_help_lists_only_working_commands() -> None:
    from observer_app.cli import COMMANDS, SUMMARIES
    result = run_cli("--help")
    assert result.returncode == 0
    for module in COMMANDS:
        verb, _ = SUMMARIES[module]
        assert verb in result.stdout.split()


def test_the_help_summaries_say_what_each_verb_says_of_itself() -> None:
    """SUMMARIES spares --help the verbs' imports; it must not drift from their own help text."""
    import importlib

    from observer_app.cli import SUMMARIES, _Parser
    for module, (verb, text) in SUMMARIES.items():
        probe = _Parser(prog="fieldmark").add_subparsers(parser_class=_Parser)
        importlib.import_module(module).add_parser(probe)
        assert (verb, text) == (next(iter(probe.choices)), probe._choices_actions[0].help), module


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



def test_a_reader_that_stops_early_ends_the_command_quietly(tmp_path):
    """`fieldmark agree STUDY | head -1`: the reader closes the pipe; no traceback (Unix tools end quietly)."""
    from tests.conftest import ROOT
    from tests.export.small_studies import solo_laptops_study
    study = solo_laptops_study(tmp_path)  # aligned, so agree has something to print
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    process = subprocess.Popen([sys.executable, "-m", "observer_app", "agree", str(study), "--resamples", "20"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, text=True)
    process.stdout.close()  # the reader is gone before the first line is written
    errors = process.stderr.read()
    assert process.wait(timeout=120) == 141  # 128 + SIGPIPE, as a shell reports a tool ended by a closed pipe
    assert errors == ""


@pytest.mark.parametrize("chosen", ["", "system"])
def test_verbs_read_logs_with_jemalloc_unless_the_environment_chose_a_pool(tmp_path: Path, chosen: str) -> None:
    """A verb makes jemalloc Arrow's pool (sync/arrow_memory.py: freed pages are reused by the
    next row group of a dataset) but respects ARROW_DEFAULT_MEMORY_POOL, Arrow's own setting
    (pyarrow documentation, "Memory and IO interfaces", default memory pool; from memory)."""
    import pyarrow as pa

    try:
        pa.jemalloc_memory_pool()
        expected = chosen or "jemalloc"
    except NotImplementedError:  # a build without jemalloc keeps its default
        expected = chosen or pa.default_memory_pool().backend_name
    program = ("import sys, pyarrow as pa; from observer_app.cli import main; "
               f"code = main(['agree', {str(tmp_path / 'no-study')!r}]); "
               "print(code, pa.default_memory_pool().backend_name)")
    env = {key: value for key, value in os.environ.items() if key != "ARROW_DEFAULT_MEMORY_POOL"}
    env.update(PYTHONPATH=str(Path(__file__).resolve().parents[2]), **({"ARROW_DEFAULT_MEMORY_POOL": chosen} if chosen else {}))
    result = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True, env=env, timeout=120)
    assert result.stdout.split() == ["2", expected], result.stderr
