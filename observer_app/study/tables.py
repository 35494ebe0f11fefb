"""Column contracts of the tables the observation store returns.  One place, on purpose.

All timestamps are pandas ``datetime64[ns, UTC]`` on the *device's* clock (the
coder's laptop), not yet on the log's clock: sync/ maps them.

OBSERVATIONS (``Store.observations()``) -- the current view: corrections applied,
superseded rows hidden.  One row per coded window.
    observation_id  string   UUID of the row as first written
    session_id      string   UUID of the coding session
    coder           string   who coded
    device          string   device label (the clock it was coded on)
    mode            string   "live" or "replay"
    paired_start    datetime start of slot 0 of a paired run on this device's clock (NaT when solo/replay);
                             a signal start's press, or the typed shared start time
    pairing_id      string   the code both devices of a paired run share (NA when solo, replay,
                             or a paired run from before signal starts)
    learner         string   roster learner id
    slot            Int64    schedule slot number (NA for replay)
    clip            string   replay clip id ("" for live)
    window_start    datetime start of the observed window
    window_end      datetime end of the observed window
    coded_at        datetime when the last code of the row was entered
    <dimension>     string   one column per scheme dimension: the code name, NA if not coded
    no_code         bool     the window ended with nothing coded (all dimensions NA)
    note            string   free text ("" when none)
    scheme_hash     string   content hash of the scheme the row was coded with
    corrected       bool     the row is the result of a correction

SESSIONS (``Store.sessions()``):
    session_id, coder, device, mode, paired_start, started_at (datetime UTC),
    monotonic_start (float, the device's monotonic clock at start, seconds),
    window_seconds (float), order (string: "fixed"/"shuffled" live, "time"/"sample:N"/"plan:<plan id>"
    replay, "imported" for sessions from a CSV), seed (Int64), scheme_hash, ended_at (datetime, NaT open),
    pairing_id (string, NA unless paired), typed_clock_difference_s (float, NaN unless the coders
    started on a typed wall-clock time: the difference they typed, partner minus this device)

REPLAY PLANS (``Store.replay_plans()``; observer_app/coding/replay_plan.py decides them):
    plan_id, rule_json (the ReplayRule as JSON), description (the rule in words), clips_digest
    (SHA-256 of the candidate clips), created_at (datetime); ``Store.replay_plan(id)`` adds the
    assignment rows: position (plan order), clip, coder, double (bool: coded by two coders)

SYNC MARKS (``Store.sync_marks()``):
    mark_id, session_id, device, coder, learner (string, "" when none), marked_at (datetime), note,
    pairing_id (string, NA unless a paired signal), kind ("" for a mark on a learner's action,
    "signal start" / "signal end" for a paired run's countdown key press)

ABSENCES (``Store.absences()``):
    session_id, learner, state ("absent" | "returned"), at (datetime)

ADJUDICATIONS (``Store.adjudications()``) -- append-only; keyed by the observations they settle:
    adjudication_id, unit (string: the unit id when recorded, kept for the audit trail),
    observations (string: the settled observation ids, sorted, joined by "|"; "" for rows
    written before stores kept them), dimension, code, adjudicator, at (datetime), reason.
    ``agreement.disagreements.place_adjudications`` puts each on the unit that now holds
    its observations; the newest per (unit, dimension) wins.

CLOCK HISTORY (``Store.clock_models()``) -- append-only, every clock decision ever stored,
oldest fitted first:
    model_id        string   UUID of the row
    device          string   the coder device
    model_key       string   the clock the model is for: the device, or "device/session_id"
                             when that device's sessions got separate models (its clock was
                             corrected between them)
    method          string   "manual", "marks", "borrowed", "auto" ("" in rows from stores
                             before the history: read the method from model_json)
    command         string   the command that stored it ("fieldmark align --set-offset ..."; "" in old rows)
    evidence        string   one line: what the model rests on (marks used, standard errors)
    replaces_earlier bool    `--refit`: the device's earlier decisions no longer apply
    uncertain_accepted bool  stored above the uncertainty bound with `--accept-uncertain`
    model_json      string   ``sync.clock.ClockModel.to_json()``
    at              datetime when it was fitted (UTC)
  Which row a clock uses: ``observer_app.pipeline.alignment.stored_clock_models``.
"""
from __future__ import annotations

OBSERVATION_COLUMNS: tuple[str, ...] = (
    "observation_id", "session_id", "coder", "device", "mode", "paired_start", "pairing_id", "learner",
    "slot", "clip", "window_start", "window_end", "coded_at",
)
OBSERVATION_TAIL_COLUMNS: tuple[str, ...] = ("no_code", "note", "scheme_hash", "corrected")
RESERVED_COLUMNS: frozenset[str] = frozenset(
    OBSERVATION_COLUMNS + OBSERVATION_TAIL_COLUMNS
    + ("unit", "log_id", "start_ns", "end_ns", "coded_ns", "time", "label", "label_source", "group")
)
