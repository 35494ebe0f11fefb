"""Column contracts of the tables export/ consumes and produces.  One place, on purpose.

INPUT -- what the caller hands in:
    EVENTS   (sync/tables.py) one row per log event, ``learner`` = the log's learner id,
             ``time_ns`` UTC ns on the log's clock.  Sorted by (learner, time_ns) is
             expected; unsorted input is sorted once.
    WINDOWS  (sync/tables.py) one row per observation: the OBSERVATIONS columns
             (observer_app/study/tables.py; one column per scheme dimension holding the code
             name) plus ``log_id``, ``start_ns`` (inclusive), ``end_ns`` (exclusive),
             ``coded_ns``; optionally
    unit     string   agreement's pairing: observations with the same unit are different
                      coders' codes of the same window.  Absent -> each observation is
                      its own unit.
    ADJUDICATIONS (observer_app/study/tables.py) unit, dimension, code, at ... ; the newest per
             (unit, dimension) wins.
    ROSTER   learner, label, log_id, then attribute columns (site, cohort ...).  ``label``
             and ``log_id`` are never exported.

WINDOW -- the stretch of a learner's log the features cover is the WINDOWS row's
[start_ns, end_ns) on the log's clock, start inclusive, end exclusive.  sync/windows.py
decides it (anchor at the window start or the coding time, extents before and after);
export only reads it.  Only the observed learner's events count.

FEATURES -- one column per figure, float64 (counts too, so NaN can mean "undefined").
"Attempt" = an event whose outcome is an error outcome or a success outcome
(FeatureSettings; defaults: errors {"incorrect"}, successes {"correct"}).
    event_count                 events in the window
    events_per_minute           event_count / window length in minutes
    action_<name>               events of that action in the window, for the K actions with
                                most events over all windows (K = FeatureSettings.top_actions;
                                only window events choose the columns)
    outcome_<name>              events with that outcome in the window, one per outcome seen in
                                any window
                                (<name>: the value lower-cased with non-word characters as _; an IRI
                                such as an xAPI verb id by its last path segment; a short hash is
                                added when two values would share a name)
    error_rate                  error outcomes / attempts in the window (NaN without attempts)
    help_requests               events whose action is a help action (defaults: "hint",
                                "help", "help_request", "hint_request"; xAPI logs carry
                                verb ids, so name those: fieldmark export --help-actions)
    seconds_since_previous      window start minus the learner's last event before it (NaN
                                when there is none)
    gap_mean_s, gap_median_s,   mean / median / largest time between consecutive events
    gap_max_s                   inside the window (NaN with fewer than two events)
    idle_longest_s              longest stretch of the window without an event, counting
                                window start to the first event and the last event to window end
    rapid_share                 share of the window's events that came less than
                                FeatureSettings.rapid_seconds after the learner's previous
                                event (NaN without events)
    distinct_items              distinct non-empty items touched in the window
    attempts_without_success    as of window end: attempts in a row on the skill of the
                                learner's latest attempt since their last success on it
    wheel_spinning              1.0 when attempts_without_success >= 10 (common practice:
                                ten attempts without mastery), else 0.0
    history_attempts            the learner's attempts before window end (whole log so far)
    history_error_rate          error outcomes / attempts before window end (NaN without)
  Every feature uses only events before the window end: no future leakage.

EXPORTED WINDOWS -- one row per unit (or per observation when there is no unit); the
unit's learner and window are those of its first observation (earliest start, ties by
coder name), the labels come from all of its observations (export/labels.py):
    window_id        string   keyed pseudonym of the unit (raw unit with keep_ids)
    learner          string   keyed pseudonym of the roster learner (raw id with keep_ids)
    group            string   same as learner: the grouping for grouped cross-validation
    <attribute>      roster attribute columns (site, cohort ...), as in the roster
    log_id           string   only with keep_ids
    mode             string   "live" or "replay"
    coders           int64    how many observations (coders) the unit has
    start_ns         int64    window start, UTC ns on the log's clock (inclusive)
    end_ns           int64    window end (exclusive)
    <dimension>      string   the resolved label, one column per scheme dimension (NA when
                              unresolved or could-not-observe)
    label_source_<dimension>  string  "adjudicated" | "agreed" | "single" | "first-coder" |
                              "majority" | "unresolved" | "could-not-observe" (export/labels.py)
    <feature columns>         as above
  Never exported: roster labels, notes, observation and session ids, device names, clip
  ids, raw learner ids (unless keep_ids).

DESCRIPTIONS -- every exported column's meaning, one line each (export/column_descriptions.py):
  in a Parquet file as field metadata (key ``description``); in the manifest as
  ``column_descriptions`` (every column) and ``feature_definitions`` (feature columns,
  keyed by output column name: action_<name> and a lab's own feature columns included).
"""
from __future__ import annotations

WINDOW_ID = "window_id"
LEARNER = "learner"
GROUP = "group"
LOG_ID = "log_id"
MODE = "mode"
CODERS = "coders"
START = "start_ns"
END = "end_ns"
UNIT = "unit"
LABEL_SOURCE_PREFIX = "label_source_"

ROSTER_PRIVATE_COLUMNS: tuple[str, ...] = ("learner", "label", "log_id")

LABEL_POLICIES: tuple[str, ...] = ("first-coder", "agreed-only", "majority")

METADATA_KEY = b"fieldmark"
"""Parquet schema-metadata key holding the manifest's JSON (feature and label columns)."""
