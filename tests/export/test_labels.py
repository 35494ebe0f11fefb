"""Which label wins across coders: adjudicated, else agreed, else the policy (export/labels.py)."""
from __future__ import annotations

import pandas as pd
import pytest

from export.labels import resolve_labels

CANNOT = {"affect": "unclear", "activity": "not_visible"}


def observations(rows: list[tuple]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["observation_id", "coder", "start_ns", "unit", "affect", "activity"])


# u1: two coders agree on affect, disagree on activity
# u2: three coders, affect 2 x bored vs 1 x focused; the earliest observation (start 1, coder "x") says focused
# u3: two coders, one each way (no majority)
# u4: both coders could not observe affect
WINDOWS = observations([
    ("o1", "x", 5, "u1", "bored", "on_task"),
    ("o2", "y", 6, "u1", "bored", "off_task"),
    ("o3", "y", 1, "u2", "bored", "on_task"),
    ("o4", "x", 1, "u2", "focused", "on_task"),
    ("o5", "z", 0 + 2, "u2", "bored", None),
    ("o6", "x", 3, "u3", "bored", "on_task"),
    ("o7", "y", 3, "u3", "focused", "on_task"),
    ("o8", "x", 4, "u4", "unclear", "on_task"),
    ("o9", "y", 4, "u4", "unclear", "on_task"),
])


def resolved(policy: str, adjudications: pd.DataFrame | None = None, **options) -> pd.DataFrame:
    return resolve_labels(WINDOWS, ["affect", "activity"], CANNOT, adjudications, policy, **options).set_index("unit")


def test_first_coder_policy() -> None:
    table = resolved("first-coder")
    assert table.loc["u1", "affect"] == "bored" and table.loc["u1", "label_source_affect"] == "agreed"
    assert table.loc["u2", "affect"] == "focused" and table.loc["u2", "label_source_affect"] == "first-coder"
    assert table.loc["u2", "observation"] == 3                                       # o4: start 1, coder x
    assert table.loc["u1", "activity"] == "on_task"                                  # o1 started first
    assert table.loc["u2", "activity"] == "on_task" and table.loc["u2", "label_source_activity"] == "agreed"
    assert list(table["coders"]) == [2, 3, 2, 2]


def test_majority_policy_needs_more_than_half() -> None:
    table = resolved("majority")
    assert table.loc["u2", "affect"] == "bored" and table.loc["u2", "label_source_affect"] == "majority"
    assert pd.isna(table.loc["u3", "affect"]) and table.loc["u3", "label_source_affect"] == "unresolved"
    assert pd.isna(table.loc["u1", "activity"])                                      # 1 against 1


def test_agreed_only_policy_leaves_disagreements_unlabelled() -> None:
    table = resolved("agreed-only")
    assert pd.isna(table.loc["u2", "affect"]) and pd.isna(table.loc["u3", "affect"])
    assert table.loc["u1", "affect"] == "bored"


def test_newest_adjudication_wins_over_coders_and_older_adjudications() -> None:
    adjudications = pd.DataFrame({
        "adjudication_id": ["a1", "a2", "a3"], "unit": ["u3", "u3", "u1"], "dimension": ["affect", "affect", "activity"],
        "code": ["bored", "confused", "off_task"], "adjudicator": "lead", "reason": "",
        "at": pd.to_datetime(["2026-05-01T10:00Z", "2026-05-01T11:00Z", "2026-05-01T09:00Z"]),
    })
    table = resolved("agreed-only", adjudications)
    assert table.loc["u3", "affect"] == "confused" and table.loc["u3", "label_source_affect"] == "adjudicated"
    assert table.loc["u1", "activity"] == "off_task"
    assert table.loc["u1", "affect"] == "bored"                                      # adjudication was for activity only


def test_could_not_observe_is_dropped_by_default_and_kept_on_request() -> None:
    table = resolved("first-coder")
    assert pd.isna(table.loc["u4", "affect"]) and table.loc["u4", "label_source_affect"] == "could-not-observe"
    kept = resolved("first-coder", keep_could_not_observe=True)
    assert kept.loc["u4", "affect"] == "unclear"


def test_a_row_without_any_label_is_dropped() -> None:
    frame = observations([("o1", "x", 1, "u1", "unclear", "not_visible"), ("o2", "x", 2, "u2", "bored", None)])
    table = resolve_labels(frame, ["affect", "activity"], CANNOT)
    assert list(table["unit"]) == ["u2"]


def test_without_units_every_observation_is_its_own_row() -> None:
    frame = WINDOWS.drop(columns="unit")
    table = resolve_labels(frame, ["affect", "activity"], CANNOT)
    assert len(table) == len(frame)
    assert set(table["label_source_affect"]) <= {"single", "could-not-observe"}


def test_unknown_policy_is_refused() -> None:
    with pytest.raises(ValueError, match="policy"):
        resolve_labels(WINDOWS, ["affect"], CANNOT, policy="loudest")
