"""An automatic fit with no evidence is never stored (issue: a guess stored as a decision).

A study of our own with a lab's usual mistake: the roster's log ids are lower case, the
log's upper case, so no observed learner has a log event.  The scan's curve is flat; its
errors are unknown, and align refuses in one line instead of storing an offset.
"""
from __future__ import annotations

import datetime as dt

from observer_app.study.store import Store
from tests.conftest import assert_user_error, call_cli

STUDY_TOML = """[study]
name = "No evidence"
timezone = "Europe/Berlin"
[schedule]
window_seconds = 20
order = "fixed"
seed = 1
[[logs]]
path = "logs/log.csv"
format = "csv"
timezone = "Europe/Berlin"
[logs.columns]
learner = "user"
time = "when"
action = "verb"
outcome = "result"
"""


def test_a_scan_of_learners_without_log_events_is_refused_not_stored(tmp_path):
    study = tmp_path / "study"
    assert call_cli("init", study).returncode == 0
    (study / "study.toml").write_text(STUDY_TOML)
    (study / "roster.csv").write_text("learner,label,log_id\n" + "".join(f"P{i},Seat {i},stu-{i}\n" for i in range(1, 4)))
    start = dt.datetime(2026, 5, 4, 9, 0)
    lines = ["user,when,verb,result"] + [f"STU-{i},{start + dt.timedelta(seconds=s + i):%Y-%m-%dT%H:%M:%S},try,correct"
                                         for s in range(0, 1200, 3) for i in range(1, 4)]
    (study / "logs" / "log.csv").write_text("\n".join(lines) + "\n")
    codes = ["coder,learner,time,end,activity"] + [
        f"ann,P{1 + n % 3},{start + dt.timedelta(seconds=20 * n):%Y-%m-%dT%H:%M:%S}+02:00,"
        f"{start + dt.timedelta(seconds=20 * n + 20):%Y-%m-%dT%H:%M:%S}+02:00,{'on_task' if n % 2 else 'off_task'}"
        for n in range(30)]
    (tmp_path / "codes.csv").write_text("\n".join(codes) + "\n")
    assert call_cli("import", study, tmp_path / "codes.csv").returncode == 0
    assert_user_error(call_cli("align", study, "--method", "auto"), "ann", "unknown", "--set-offset")
    with Store(study / "observations.sqlite") as store:
        assert store.clock_models().empty  # nothing was stored
