"""How two paired coders start together: on a spoken countdown, or on a typed clock time.

The signal start (the default): one device shows a short pairing code, the other types
it, so both devices share a pairing id without a network; one coder reads "3, 2, 1,
now" and both press the start key on "now".  Each device anchors slot 0 on its own
monotonic clock at its key press, so the schedules agree to the coders' reaction times
whatever the wall clocks say.

The typed start: both coders type the same wall-clock time (e.g. "10:30") and each
device puts slot 0 at that time on its own clock.  That is only as good as the clocks'
agreement, so it needs the clock difference the coders read off the clock-check screen,
within TYPED_START_BOUND_S.  A time without a date means the occurrence nearest to now,
so "00:02" typed at 23:58 means two minutes after midnight.
"""
from __future__ import annotations

import hashlib
import math
import re
import secrets
import zoneinfo
from collections.abc import Callable, Sequence
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


# -- the signal start: a pairing code typed from one device to the other, a spoken countdown ----------

# Letters and digits that cannot be misread for one another aloud or on screen (no 0/O, 1/I/L).
PAIRING_ALPHABET = "ABCDEFGHJKMNPQRSTUVWXYZ23456789"
PAIRING_CODE_LENGTH = 5  # 31**5, about 29 million codes: two runs of one study will not share one
TYPED_START_BOUND_S = 1.0  # a typed start needs clocks that agree within this (issue: default 1 s)
COUNTDOWN_WORDS: tuple[str, ...] = ("3", "2", "1", "now")
COUNTDOWN_STEP_S = 1.0


def new_pairing_code(random_bytes: bytes | None = None) -> str:
    """A fresh pairing code to show the partner (``random_bytes`` fixes it for tests)."""
    data = random_bytes if random_bytes is not None else secrets.token_bytes(PAIRING_CODE_LENGTH)
    return "".join(PAIRING_ALPHABET[byte % len(PAIRING_ALPHABET)] for byte in data[:PAIRING_CODE_LENGTH])


def read_pairing_code(text: str) -> str:
    """The code as the partner typed it -> the pairing id (upper case, spaces and dashes dropped)."""
    code = re.sub(r"[\s-]", "", text).upper()
    wrong = sorted(set(code) - set(PAIRING_ALPHABET))
    if len(code) != PAIRING_CODE_LENGTH or wrong:
        why = f"has {', '.join(wrong)}, which no code uses" if wrong else f"has {len(code)} characters"
        raise InputError(None, "pairing code", f"{text!r} {why}; type the {PAIRING_CODE_LENGTH} characters "
                         "shown on your partner's screen, or show yours")
    return code


def read_clock_difference(text: str, bound_s: float = TYPED_START_BOUND_S) -> float:
    """The clock difference the coders typed (seconds, partner minus this device) -> float.

    Refused above ``bound_s``: two clocks that far apart would put the two coders on
    different moments of the same slot, so the typed start is not safe; start on the
    spoken countdown instead, which does not read the clocks at all.
    """
    try:
        seconds = float(str(text).strip().replace(",", ".").removesuffix("s").strip())
    except ValueError:
        raise InputError(None, "clock difference", f"cannot read {text!r}; type the seconds your partner's "
                         "clock is ahead of this one (negative when behind), e.g. 0 or -0.5") from None
    if not math.isfinite(seconds):
        raise InputError(None, "clock difference", f"{text!r} is not a number of seconds; type e.g. 0 or -0.5")
    if abs(seconds) > bound_s:
        raise InputError(None, "clock difference", f"the clocks differ by {seconds:+g} s, more than the "
                         f"{bound_s:g} s a typed start allows; start on the spoken countdown instead")
    return seconds


class Countdown:
    """The words one coder reads aloud, "3, 2, 1, now", one per COUNTDOWN_STEP_S from ``begin``.

    Only a prompt to read from: each device anchors at its own coder's key press on
    "now", not at this countdown, so the two screens need not show it in step.
    """

    def __init__(self, monotonic: Callable[[], float]) -> None:
        self._monotonic = monotonic
        self._began: float | None = None

    def begin(self) -> None:
        self._began = self._monotonic()

    def word(self) -> str:
        """The word to read now ("" before ``begin`` and after "now" has been shown a step)."""
        if self._began is None:
            return ""
        step = int((self._monotonic() - self._began) // COUNTDOWN_STEP_S)
        return COUNTDOWN_WORDS[step] if 0 <= step < len(COUNTDOWN_WORDS) else ""


def schedule_check_code(run_key: str, learners: Sequence[str], window_seconds: float, order: str, seed: int,
                        slot: int, learner: str | None) -> str:
    """Three characters both screens of a paired run show: equal when both are on the same
    run, settings, roster, slot and learner, so the coders see at a glance they are in step."""
    text = "|".join([run_key, ",".join(learners), f"{window_seconds:g}", order, str(seed), str(slot), learner or ""])
    digest = hashlib.sha256(text.encode()).digest()
    return "".join(PAIRING_ALPHABET[byte % len(PAIRING_ALPHABET)] for byte in digest[:3])
