"""What each exported column means, keyed by the column's name in the output file.

A data scientist who opens windows.parquet in another tool sees these as Parquet field
metadata (key ``description``); CSV users find the same text in the manifest
(``column_descriptions``), and the feature columns' in ``feature_definitions``.
The prose contract stays in export/tables.py; this module is its machine-readable form.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence

from export.features import FeatureFunction
from export.tables import CODERS, END, GROUP, LABEL_SOURCE_PREFIX, LEARNER, LOG_ID, MODE, START, WINDOW_ID

IDENTITY: dict[str, str] = {
    WINDOW_ID: "keyed pseudonym of the coded window (the unit of paired coders' observations)",
    LEARNER: "keyed pseudonym of the roster learner",
    GROUP: "the grouping for grouped cross-validation (same as learner): no learner in two folds",
    LOG_ID: "the learner's id in the log (only with --keep-ids; never leave the study team)",
    MODE: "how the window was coded: live (in the room) or replay (from the log)",
    CODERS: "how many coders' observations the window has",
    START: "window start, UTC nanoseconds on the log's clock (inclusive)",
    END: "window end, UTC nanoseconds on the log's clock (exclusive)",
}

BUILT_IN_FEATURES: dict[str, str] = {
    "event_count": "events in the window",
    "events_per_minute": "events in the window per minute of window",
    "error_rate": "error outcomes / attempts in the window (NaN without attempts)",
    "help_requests": "events whose action is a help action",
    "seconds_since_previous": "window start minus the learner's last event before it (NaN when none)",
    "gap_mean_s": "mean time between consecutive events inside the window (NaN with fewer than two)",
    "gap_median_s": "median time between consecutive events inside the window (NaN with fewer than two)",
    "gap_max_s": "largest time between consecutive events inside the window (NaN with fewer than two)",
    "idle_longest_s": "longest stretch of the window without an event, window edges included",
    "rapid_share": "share of the window's events that came soon after the learner's previous event",
    "distinct_items": "distinct non-empty items touched in the window",
    "attempts_without_success": "as of window end: attempts in a row on the latest skill since its last success",
    "wheel_spinning": "1.0 when attempts_without_success >= 10 (common practice), else 0.0",
    "history_attempts": "the learner's attempts before window end (whole log so far)",
    "history_error_rate": "error outcomes / attempts before window end (NaN without attempts)",
}

PREFIXED_FEATURES: dict[str, str] = {
    "action_": "events of the action '{}' in the window (one of the most frequent actions)",
    "outcome_": "events with the outcome '{}' in the window",
}


def feature_description(column: str, feature_of_column: Mapping[str, str],
                        features: Mapping[str, FeatureFunction]) -> str:
    """One feature column's definition: built-in text, else the defining function's first docstring line."""
    if column in BUILT_IN_FEATURES:
        return BUILT_IN_FEATURES[column]
    for prefix, text in PREFIXED_FEATURES.items():
        if column.startswith(prefix) and feature_of_column.get(column) in ("action_counts", "outcome_counts"):
            return text.format(column[len(prefix):])
    function = features.get(feature_of_column.get(column, ""))
    doc = (function.__doc__ or "").strip().splitlines() if function is not None else []
    return doc[0] if doc else "a lab-defined feature (its function has no docstring)"


def describe_columns(columns: Sequence[str], *, feature_columns: Sequence[str], label_columns: Sequence[str],
                     attribute_columns: Sequence[str], feature_of_column: Mapping[str, str],
                     features: Mapping[str, FeatureFunction]) -> dict[str, str]:
    """Every output column -> one line saying what it holds (same order as ``columns``)."""
    known: dict[str, str] = dict(IDENTITY)
    for dimension in label_columns:
        known[dimension] = (f"the resolved label of the dimension '{dimension}' (a code name; missing when "
                            "unresolved or could-not-observe)")
        known[LABEL_SOURCE_PREFIX + dimension] = (f"where the '{dimension}' label came from: adjudicated, agreed, "
                                                  "single, first-coder, majority, unresolved or could-not-observe")
    for attribute in attribute_columns:
        known[attribute] = f"roster attribute '{attribute}', as in roster.csv"
    for column in feature_columns:
        known[column] = "feature: " + feature_description(column, feature_of_column, features)
    return {column: known.get(column, "") for column in columns}
