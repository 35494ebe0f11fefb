"""Small study folders of our own for the whole-pipeline tests: six apprentices on the
panel-wiring simulator, a CSV log, two coders on solo laptops.

``solo_laptops_study`` builds one through the real command line (init, import, align):
coder ann's laptop agrees with the log server; coder ben's laptop runs ``offset_s``
ahead (28 s: the demo's planted offset).  Each round both coders watch every learner,
ben starting 3 s after ann on the log's clock, so their windows overlap there while
their device times are 31 s apart.  Codes differ on some windows, so there is
something to adjudicate.
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from tests.conftest import call_cli

LEARNERS = [f"L{number:02d}" for number in range(1, 7)]
LOG_IDS = [f"n-{number:04d}" for number in range(1, 7)]
START = pd.Timestamp("2026-03-03T08:00:00Z")
WINDOW_S = 20
ROUNDS = 2
LOG_COLUMNS = "trainee,timestamp,event,result,step,skill,seconds"


def write_roster(study: Path, log_ids: list[str]) -> None:
    rows = [f"{learner},Bench {n},{log_id},north,A" for n, (learner, log_id) in enumerate(zip(LEARNERS, log_ids), 1)]
    (study / "roster.csv").write_text("learner,label,log_id,site,cohort\n" + "\n".join(rows) + "\n")


def write_log(study: Path, log_ids: list[str], *, shift_s: float = 0.0, stamp=lambda t: t.isoformat()) -> None:
    """Every learner acts every 2 s (connect_wire, alternating outcomes) over the whole session;
    ``shift_s`` moves every event (to put them outside the observed windows)."""
    span = ROUNDS * len(LEARNERS) * WINDOW_S + 60
    lines = [LOG_COLUMNS]
    for log_id in log_ids:
        for second in range(0, span, 2):
            moment = START + pd.Timedelta(seconds=second + shift_s)
            outcome = "correct" if second % 4 else "incorrect"
            lines.append(f"{log_id},{stamp(moment)},connect_wire,{outcome},step-1,breaker,1.5")
    (study / "logs").mkdir(exist_ok=True)
    (study / "logs" / "centre_north.csv").write_text("\n".join(lines) + "\n")


def coded_windows(offset_s: float) -> pd.DataFrame:
    """The two coders' windows as an import CSV table (device times)."""
    rows = []
    for round_number in range(ROUNDS):
        for position, learner in enumerate(LEARNERS):
            log_start = START + pd.Timedelta(seconds=(round_number * len(LEARNERS) + position) * WINDOW_S)
            activity = "on_task" if position % 2 else "off_task"
            rows.append({"coder": "ann", "device": "laptop-a", "learner": learner,
                         "time": log_start.isoformat(), "activity": activity, "affect": "focused"})
            differs = position in (1, 4)
            ben_start = log_start + pd.Timedelta(seconds=3 + offset_s)
            rows.append({"coder": "ben", "device": "laptop-b", "learner": learner, "time": ben_start.isoformat(),
                         "activity": "task_discussion" if differs else activity,
                         "affect": "confused" if position == 2 else "focused"})
    return pd.DataFrame(rows)


def solo_laptops_study(tmp_path: Path, *, offset_s: float = 28.0, log_ids: list[str] | None = None,
                       roster_ids: list[str] | None = None, align: bool = True) -> Path:
    """A study folder built through the command line as a lab would build it."""
    study = tmp_path / "study"
    assert call_cli("init", study).returncode == 0
    write_roster(study, roster_ids or LOG_IDS)
    write_log(study, log_ids or LOG_IDS)
    codes = tmp_path / "codes.csv"
    coded_windows(offset_s).to_csv(codes, index=False)
    result = call_cli("import", study, codes)
    assert result.returncode == 0, result.stderr
    if align:
        result = call_cli("align", study, "--set-offset", "laptop-a=0", "--set-offset", f"laptop-b={offset_s}")
        assert result.returncode == 0, result.stderr
    return study
