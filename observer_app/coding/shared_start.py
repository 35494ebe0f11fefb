"""The shared start time two paired coders type, read in the study's time zone.

Both coders type the same wall-clock time (e.g. "10:30"), so both devices put slot 0
at the same moment and stay on the same learner.  A time without a date means the
occurrence nearest to now, so "00:02" typed at 23:58 means two minutes after midnight.
"""
from __future__ import annotations

import re
import zoneinfo
from datetime import datetime, time, timedelta, timezone

from sync.errors import InputError

_CLOCK_TIME = re.compile(r"^(\d{1,2}):(\d{2})(?::(\d{2}))?$")
WHERE = "shared start"


def parse_shared_start(text: str, zone_name: str, now: datetime) -> datetime:
    """"HH:MM", "HH:MM:SS" (study time zone) or ISO 8601 with an offset -> UTC datetime."""
    text = text.strip()
    match = _CLOCK_TIME.match(text)
    if match is None:
        try:
            stamp = datetime.fromisoformat(text)
        except ValueError:
            stamp = None
        if stamp is None or stamp.tzinfo is None:
            raise InputError(None, WHERE, f"cannot read {text!r}; type the time as HH:MM or HH:MM:SS, e.g. 10:30")
        return stamp.astimezone(timezone.utc)
    hour, minute, second = int(match[1]), int(match[2]), int(match[3] or 0)
    if hour > 23 or minute > 59 or second > 59:
        raise InputError(None, WHERE, f"{text!r} is not a time of day; use 00:00 to 23:59")
    zone = zoneinfo.ZoneInfo(zone_name)
    today = now.astimezone(zone).date()
    candidates = [datetime.combine(today + timedelta(days=shift), time(hour, minute, second), tzinfo=zone)
                  for shift in (-1, 0, 1)]
    nearest = min(candidates, key=lambda moment: abs((moment - now).total_seconds()))
    return nearest.astimezone(timezone.utc)


def suggested_start_times(now: datetime, zone_name: str, count: int = 4) -> list[str]:
    """Start times to pick from: the next full minute with time to spare, then the next five-minute marks."""
    local = now.astimezone(zoneinfo.ZoneInfo(zone_name)).replace(second=0, microsecond=0)
    first = local + timedelta(minutes=2)
    times = [first]
    mark = first + timedelta(minutes=5 - first.minute % 5)
    while len(times) < count:
        times.append(mark)
        mark += timedelta(minutes=5)
    return [f"{moment:%H:%M}" for moment in times]
