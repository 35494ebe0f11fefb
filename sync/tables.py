"""Column contracts of the tables sync/ produces and consumes.  One place, on purpose.

EVENTS -- one row per learning-system log event, every reader returns this:
    learner     string (dictionary-encoded)  the learner's id *in the log* (roster.log_id)
    time_ns     int64    UTC, nanoseconds since the Unix epoch, on the log server's clock
    action      string   what the learner did (verb id for xAPI)
    outcome     string   normalised result: "correct", "incorrect", "completed", "" when none
    item        string   the task item / object id ("" when none)
    skill       string   the skill or step ("" when none)
    duration_s  float64  seconds the event took (NaN when not given)
    source      string   the file the row came from
    source_row  int64    1-based row (CSV: data row after the header; JSON lines: line)
  Sorted by (learner, time_ns).

CLOCK MODEL -- ``sync.clock.ClockModel`` (a dataclass), one per device:
    device time = log time + offset_s + drift_ppm * 1e-6 * (log time - reference)
  so a device whose clock runs ahead has a positive offset_s.

WINDOWS -- one row per observation, what export consumes:
    every column of the observations table (observer_app/tables.py) plus
    log_id      string  roster.log_id of the observed learner
    start_ns    int64   window start, UTC ns on the log's clock (inclusive)
    end_ns      int64   window end,   UTC ns on the log's clock (exclusive)
    coded_ns    int64   coded_at mapped to the log's clock
"""
from __future__ import annotations

EVENT_COLUMNS: tuple[str, ...] = (
    "learner", "time_ns", "action", "outcome", "item", "skill", "duration_s", "source", "source_row",
)
WINDOW_EXTRA_COLUMNS: tuple[str, ...] = ("log_id", "start_ns", "end_ns", "coded_ns")
