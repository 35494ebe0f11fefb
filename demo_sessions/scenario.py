"""What the demo study looks like: centres, learners, sessions, coders and their clocks.

One frozen dataclass holds every number the generator uses, so the full demo and the
small committed copy differ only in a few sizes.  The scenario is our own invention:
apprentice electricians practising on a panel-wiring simulator at two training centres.
"""
from __future__ import annotations

from dataclasses import dataclass

ACTIVITY_STATES: tuple[str, ...] = ("on_task", "task_discussion", "off_task", "rapid_guessing", "away")
AFFECT_STATES: tuple[str, ...] = ("focused", "confused", "frustrated", "bored")


@dataclass(frozen=True)
class Centre:
    """A training centre: its simulator writes one log, in its own format."""

    name: str            # "north" / "south": the roster's site column
    log_format: str      # "csv" (naive local time) or "xapi" (JSON lines, UTC)
    log_file: str        # path inside the study folder
    session_day: str     # ISO date of the coded session
    session_start: str   # local wall time the coders start, "HH:MM"
    learner_prefix: str  # first letter of the log ids, so the two logs never collide
    behaviour: str = "own_bench"  # how its apprentices work (simulator_log.BEHAVIOUR_ACTION_RATE)


@dataclass(frozen=True)
class Scenario:
    """Every number the generator uses."""

    timezone: str = "Europe/Berlin"
    centres: tuple[Centre, ...] = (
        Centre("north", "csv", "logs/centre_north.csv", "2026-03-10", "09:00", "n"),
        Centre("south", "xapi", "logs/centre_south.jsonl", "2026-03-11", "13:30", "s", behaviour="shared_bench"),
    )
    learners_per_centre: int = 12
    coded_minutes: float = 50.0      # one coded session per centre
    margin_minutes: float = 5.0      # the simulator runs this long before and after coding
    paired_minutes: float = 25.0     # the first part of each session is coded paired
    window_seconds: int = 20
    schedule_order: str = "shuffled"
    schedule_seed: int = 7
    coders: tuple[str, ...] = ("coder_a", "coder_b")
    devices: tuple[str, ...] = ("laptop-a", "laptop-b")
    accuracy: tuple[float, ...] = (0.84, 0.87)      # share of windows coded as the true state
    affect_accuracy: tuple[float, ...] = (0.80, 0.83)
    could_not_observe: float = 0.05                  # share of windows the coder cannot see
    no_code: float = 0.01                            # windows that end with nothing coded
    corrections: float = 0.03                        # coded windows whose first activity key was a slip, corrected
    early_finish: float = 0.4                        # solo turns the coder closes before the window ends
    marks_per_session: int = 8                       # sync marks per coder and coding session
    # The first device's clock runs ahead by tens of seconds and drifts by tens of ppm;
    # the second is close to exact.  Drawn uniformly from these ranges (seconds, ppm).
    offset_ranges: tuple[tuple[float, float], ...] = ((25.0, 55.0), (-0.4, 0.4))
    drift_ranges: tuple[tuple[float, float], ...] = ((20.0, 60.0), (-2.0, 2.0))
    reaction_seconds: float = 0.35                   # mean delay of a coder's sync mark

    @property
    def learners(self) -> int:
        return self.learners_per_centre * len(self.centres)


FULL = Scenario()
# The committed copy: the same scenario with fewer learners and shorter sessions.
SMALL = Scenario(learners_per_centre=6, coded_minutes=20.0, paired_minutes=10.0, marks_per_session=5)
SIZES: dict[str, Scenario] = {"full": FULL, "small": SMALL}
