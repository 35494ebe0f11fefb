"""Column contracts of the tables sync/ produces and consumes.  One place, on purpose.

EVENTS -- one row per learning-system log event; ``sync.logs.read_logs`` returns this:
    learner     category (string)  the learner's id *in the log* (roster.log_id)
    time_ns     int64    UTC, nanoseconds since the Unix epoch, on the log server's clock
    action      category (string)  what the learner did (verb id for xAPI); "" when none
    outcome     category (string)  normalised result: "correct", "incorrect", "completed",
                         "" when none; other words of a CSV/Parquet log kept lower-cased
    item        category (string)  the task item / object id ("" when none)
    skill       category (string)  the skill or step ("" when none)
    duration_s  float64  seconds the event took (NaN when not given)
    source      category (string)  the file the row came from
    source_row  int64    1-based row (CSV/Parquet: data row after the header; xAPI: the
                         line the statement starts on)
  Sorted by (learner text, time_ns).  Text columns are pandas categoricals (dictionary
  encoded) so that tens of millions of rows stay small; compare them with strings as usual.

CLOCK MODEL -- ``sync.clock.ClockModel`` (a dataclass), one per clock:
    device time = log time + offset_s + drift_ppm * 1e-6 * (log time - reference_ns)
  so a device whose clock runs ahead has a positive offset_s.  method is "manual",
  "marks", "borrowed", "auto" or "identity" (no model: device time used as log time).
  Stored as the JSON text of ``ClockModel.to_json()``.  span_standard_error_s is the
  standard error of device -> log time over the device's observed span, stated so that
  two of it cover the whole span with about 95 % confidence (NaN unknown).
  CLOCK MODELS (the ``dict[str, ClockModel]`` every mapping onto the log's clock takes)
  are keyed by ``sync.clock_sessions.clock_key``: the device ("laptop-a"), or
  "device/session_id" ("laptop-a/5f0c...") for a session whose clock got its own model
  because the device's clock was corrected between sessions; a session's key is looked
  up first, then its device's (``sync.clock_sessions.model_for``).

SYNC MARKS for ``sync.clock_marks.fit_from_marks`` -- the store's SYNC MARKS columns
  (observer_app/study/tables.py) plus
    log_id      string  roster.log_id of the marked learner ("" when none)

OBSERVATIONS for ``sync.clock_scan.scan_offset`` -- the store's OBSERVATIONS columns
  (at least device, window_start, window_end and the dimensions) plus log_id as above.

OBSERVATIONS ON THE LOG'S CLOCK -- ``sync.windows.observations_on_log_clock``; what
agreement.pairing pairs: every column of the observations table plus
    log_start_ns  int64  window start, UTC ns on the log's clock (replay rows: as coded)
    log_end_ns    int64  window end, UTC ns on the log's clock
  ``attrs["warnings"]`` names live devices without a clock model (their own times used).

WINDOWS -- one row per observation, what export consumes (``sync.windows``):
    every column of the observations table (observer_app/study/tables.py) plus
    log_id      string  roster.log_id of the observed learner ("" when not in the roster)
    start_ns    int64   window start, UTC ns on the log's clock (inclusive)
    end_ns      int64   window end,   UTC ns on the log's clock (exclusive)
    coded_ns    Int64   coded_at mapped to the log's clock (NA when coded_at is NaT)
  ``attrs["warnings"]`` lists what was assumed (devices without a clock model) or left out.
"""
from __future__ import annotations

EVENT_COLUMNS: tuple[str, ...] = (
    "learner", "time_ns", "action", "outcome", "item", "skill", "duration_s", "source", "source_row",
)
WINDOW_EXTRA_COLUMNS: tuple[str, ...] = ("log_id", "start_ns", "end_ns", "coded_ns")
