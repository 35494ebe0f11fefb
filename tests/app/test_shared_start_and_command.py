"""The shared start time two coders type, and the `fieldmark app` command's boundary checks."""
from __future__ import annotations

from datetime import datetime, timezone

import pytest

from observer_app.coding.shared_start import parse_shared_start, suggested_start_times
from sync.errors import InputError
from tests.app.conftest import make_study
from tests.conftest import assert_user_error, call_cli

NOW = datetime(2026, 3, 9, 8, 0, 40, tzinfo=timezone.utc)  # 09:00:40 in Berlin


@pytest.mark.parametrize(("typed", "now", "expected"), [
    # Berlin is UTC+1 in winter and UTC+2 from the last Sunday of March (EU Directive 2000/84/EC, art. 2),
    # which in 2026 is 29 March.
    ("10:30", NOW, datetime(2026, 3, 9, 9, 30, tzinfo=timezone.utc)),
    ("10:30:15", datetime(2026, 3, 30, 7, 0, tzinfo=timezone.utc), datetime(2026, 3, 30, 8, 30, 15, tzinfo=timezone.utc)),
    # a time just after midnight typed late in the evening means the next day
    ("00:02", datetime(2026, 3, 9, 22, 58, tzinfo=timezone.utc), datetime(2026, 3, 9, 23, 2, tzinfo=timezone.utc)),
    ("2026-03-09T10:30:00+01:00", NOW, datetime(2026, 3, 9, 9, 30, tzinfo=timezone.utc)),  # ISO 8601 with offset
])
def test_shared_start_is_read_in_the_study_time_zone(typed, now, expected):
    assert parse_shared_start(typed, "Europe/Berlin", now) == expected


@pytest.mark.parametrize("typed", ["25:00", "10.30", "half past ten", "2026-03-09T10:30:00"])
def test_unreadable_shared_start_is_one_clear_error(typed):
    with pytest.raises(InputError) as caught:
        parse_shared_start(typed, "Europe/Berlin", NOW)
    assert caught.value.where == "shared start"


def test_suggested_start_times_leave_time_to_agree():
    assert suggested_start_times(NOW, "Europe/Berlin") == ["09:02", "09:05", "09:10", "09:15"]


def test_app_command_refuses_a_broken_study_before_opening_a_window(tmp_path):
    folder = make_study(tmp_path / "study")
    (folder / "study.toml").write_text("[schedule]\nwindow_seconds = 0\n[study]\ntimezone = \"Europe/Berlin\"\n")
    result = call_cli("app", folder)
    assert_user_error(result, "study.toml", "window_seconds")

