"""Roster mistakes labs make, through the real command line on a study of our own
(tests/export/small_studies.py): a log id copied onto a second learner, a coded learner
deleted from the roster.  Each must stop export with one line (common practice: a label is
only as good as the link between the person observed and their log)."""
from __future__ import annotations

from tests.conftest import assert_user_error, call_cli
from tests.export import small_studies


def _roster_with(study, lines: dict[str, str | None]) -> None:
    """Replace (or, with None, remove) roster lines by learner id."""
    path = study / "roster.csv"
    kept = []
    for line in path.read_text().splitlines():
        learner = line.split(",")[0]
        if learner in lines:
            if lines[learner] is not None:
                kept.append(lines[learner])
        else:
            kept.append(line)
    path.write_text("\n".join(kept) + "\n")


def test_two_learners_on_one_log_id_is_a_note_for_coding_and_a_refusal_for_export(tmp_path):
    study = small_studies.solo_laptops_study(tmp_path)
    _roster_with(study, {"L02": "L02,Bench 2,n-0001,north,A"})  # L01's log id copied onto L02
    kept = call_cli("align", study)  # hand-set offsets only: nothing is fitted, so align goes on
    assert kept.returncode == 0, kept.stderr
    notes = [line for line in kept.stderr.splitlines() if "note:" in line]
    assert len(notes) == 1 and "'L02' has log_id 'n-0001', as learner 'L01'" in notes[0]
    out = tmp_path / "windows.parquet"
    assert_user_error(call_cli("export", study, "--out", out), "roster.csv", "column log_id",
                      "L01, L02 share log_id 'n-0001'")
    assert not out.exists()
    # A fit would read both learners' codes against one learner's events: refused too.
    assert_user_error(call_cli("align", study, "--refit", "laptop-b"), "L01, L02 share log_id 'n-0001'")


def test_a_coded_learner_removed_from_the_roster_is_named(tmp_path):
    study = small_studies.solo_laptops_study(tmp_path)
    _roster_with(study, {"L04": None})
    assert_user_error(call_cli("export", study, "--out", tmp_path / "w.parquet"), "roster.csv",
                      "no log_id, or are no longer in roster.csv: L04")
