"""How each centre's simulator writes its log: north as CSV with naive local times and
its own column names, south as xAPI statements in JSON lines with UTC timestamps.

Both writers build their text column by column (pandas string operations), not row by row.
"""
from __future__ import annotations

import uuid
from pathlib import Path

import numpy as np
import pandas as pd

from demo_sessions.simulator_log import ATTEMPT

# North's simulator calls things by its own names; study.toml maps them ([logs.columns]).
NORTH_COLUMNS: dict[str, str] = {
    "learner": "trainee", "time": "timestamp", "action": "event", "outcome": "result",
    "item": "step", "skill": "skill", "duration": "seconds",
}
NORTH_RESULT = {True: "pass", False: "fail"}
SOUTH_HOME_PAGE = "https://sim.south.example.org"  # example.org: reserved for examples (RFC 2606)
# ADL verb vocabulary (https://adlnet.gov/expapi/verbs/, from memory): "attempted", "asked".
SOUTH_VERBS = {ATTEMPT: "http://adlnet.gov/expapi/verbs/attempted", "help_request": "http://adlnet.gov/expapi/verbs/asked"}
STATEMENT_NAMESPACE = uuid.UUID("5d7f1c0a-2b9e-5f34-8a61-0c9d2e7b4a13")


def write_north_csv(path: Path, events: pd.DataFrame, log_ids: np.ndarray, timezone: str) -> None:
    """Events -> CSV, timestamps as naive wall-clock time in ``timezone`` to the millisecond."""
    local = pd.to_datetime(events["time_ns"], unit="ns", utc=True).dt.tz_convert(timezone).dt.tz_localize(None)
    frame = pd.DataFrame({
        NORTH_COLUMNS["learner"]: log_ids[events["chain"].to_numpy()],
        NORTH_COLUMNS["time"]: local.dt.strftime("%Y-%m-%d %H:%M:%S.%f").str.slice(0, 23),
        NORTH_COLUMNS["action"]: events["action"],
        NORTH_COLUMNS["outcome"]: events["correct"].map(NORTH_RESULT).fillna(""),
        NORTH_COLUMNS["item"]: "panel-1/step-" + events["step"].astype(str).str.zfill(2),
        NORTH_COLUMNS["skill"]: events["skill"],
        NORTH_COLUMNS["duration"]: events["duration_s"].map("{:.3f}".format),
    })
    frame.to_csv(path, index=False, lineterminator="\n")


def iso_duration(seconds: pd.Series) -> pd.Series:
    """Seconds -> ISO 8601 durations such as PT7.125S or PT1M5.500S (xAPI result.duration)."""
    minutes = (seconds // 60).astype(np.int64)
    rest = (seconds - minutes * 60).map("{:.3f}".format)
    return "PT" + minutes.map(lambda m: f"{m}M" if m else "") + rest + "S"


def write_south_xapi(path: Path, events: pd.DataFrame, log_ids: np.ndarray, seed: int) -> None:
    """Events -> one xAPI statement per line (JSON lines), actor identified by account."""
    stamps = pd.to_datetime(events["time_ns"], unit="ns", utc=True).dt.strftime("%Y-%m-%dT%H:%M:%S.%f").str.slice(0, 23) + "Z"
    ids = pd.Series([str(uuid.uuid5(STATEMENT_NAMESPACE, f"{seed}|{key}"))
                     for key in (events["chain"].astype(str) + "|" + events["time_ns"].astype(str))], index=events.index)
    verb = events["action"].map(SOUTH_VERBS)
    verb_name = verb.str.rsplit("/", n=1).str[-1]
    success = events["correct"].map({True: '"success":true,', False: '"success":false,'}).fillna("")
    step = events["step"].astype(str)
    lines = (
        '{"id":"' + ids + '","actor":{"objectType":"Agent","account":{"homePage":"' + SOUTH_HOME_PAGE
        + '","name":"' + pd.Series(log_ids[events["chain"].to_numpy()], index=events.index) + '"}},'
        + '"verb":{"id":"' + verb + '","display":{"en-US":"' + verb_name + '"}},'
        + '"object":{"objectType":"Activity","id":"' + SOUTH_HOME_PAGE + "/panels/1/steps/" + step
        + '","definition":{"name":{"en-US":"Panel 1, step ' + step + '"}}},'
        + '"result":{' + success + '"duration":"' + iso_duration(events["duration_s"]) + '"},'
        + '"context":{"extensions":{"' + SOUTH_HOME_PAGE + '/extensions/skill":"' + events["skill"] + '"}},'
        + '"timestamp":"' + stamps + '"}'
    )
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
