"""The study folder: study.toml, scheme.toml, roster.csv, observations.sqlite, logs/, secret.key.

``load_study`` validates everything at the boundary so the rest of fieldmark can trust it.
"""
from __future__ import annotations

import zoneinfo
from dataclasses import dataclass, field
from warnings import warn
from pathlib import Path

import pandas as pd

from observer_app.study.roster import load_roster
from observer_app.study.scheme import Scheme, load_scheme, read_toml
from sync.errors import InputError, InputWarning
from sync.log_spec import LogSpec, log_spec_from_toml

STUDY_FILE = "study.toml"
SCHEME_FILE = "scheme.toml"
ROSTER_FILE = "roster.csv"
STORE_FILE = "observations.sqlite"
KEY_FILE = "secret.key"
ORDERS = ("fixed", "shuffled")
_SECTIONS = {"study", "schedule", "logs", "export"}
_EXPORT_KEYS = {"attributes"}
_STUDY_KEYS = {"name", "timezone", "description"}
_SCHEDULE_KEYS = {"window_seconds", "order", "seed"}


@dataclass(frozen=True)
class Study:
    dir: Path
    name: str
    timezone: str
    window_seconds: float
    order: str
    seed: int
    scheme: Scheme
    roster: pd.DataFrame
    logs: tuple[LogSpec, ...]
    warnings: tuple[str, ...] = field(default=())
    export_attributes: tuple[str, ...] = field(default=())  # roster columns allowed into exports

    @property
    def store_path(self) -> Path:
        return self.dir / STORE_FILE

    @property
    def key_path(self) -> Path:
        return self.dir / KEY_FILE


def check_timezone(name: object, path: Path, where: str) -> str:
    """An IANA zone name that zoneinfo knows, or InputError."""
    if not isinstance(name, str) or not name:
        raise InputError(path, where, "missing; give an IANA time zone such as \"Europe/Berlin\"")
    try:
        zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        raise InputError(path, where, f"unknown IANA time zone {name!r}; use a name such as \"Europe/Berlin\"") from None
    return name


def _section(raw: dict, name: str, allowed: set[str], path: Path, not_a_table: str) -> dict:
    """study.toml's [name] table ({} when absent); InputError when it is not a table or has a key
    outside ``allowed`` (``not_a_table`` says what the table should hold)."""
    table = raw.get(name, {})
    if not isinstance(table, dict):
        raise InputError(path, name, not_a_table)
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise InputError(path, f"{name}.{unknown[0]}", f"unknown key; allowed keys are {', '.join(sorted(allowed))}")
    return table


def load_study(directory: str | Path) -> Study:
    """Validate and load a study folder; raise InputError on the first problem."""
    directory = Path(directory)
    if not directory.is_dir():
        raise InputError(directory, None, "not a study folder; run `fieldmark init DIR` to create one")
    path = directory / STUDY_FILE
    raw = read_toml(path)
    unknown = sorted(set(raw) - _SECTIONS)
    if unknown:
        raise InputError(path, unknown[0], f"unknown section; allowed are {', '.join(sorted(_SECTIONS))}")
    header = _section(raw, "study", _STUDY_KEYS, path, "must be a [study] table with name and timezone")
    name = header.get("name", directory.name)
    if not isinstance(name, str):
        raise InputError(path, "study.name", "must be a text in quotes")
    timezone = check_timezone(header.get("timezone"), path, "study.timezone")
    schedule = _section(raw, "schedule", _SCHEDULE_KEYS, path,
                        "must be a [schedule] table with window_seconds, order and seed")
    window = schedule.get("window_seconds", 20)
    if isinstance(window, bool) or not isinstance(window, (int, float)) or not 1 <= window <= 3600:
        raise InputError(path, "schedule.window_seconds", "must be a number of seconds between 1 and 3600")
    order = schedule.get("order", "fixed")
    if order not in ORDERS:
        raise InputError(path, "schedule.order", f"invalid order {order!r}; use \"fixed\" or \"shuffled\"")
    seed = schedule.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed < 2**32:
        raise InputError(path, "schedule.seed", f"must be a whole number from 0 to {2**32 - 1}")
    logs = raw.get("logs", [])
    if not isinstance(logs, list) or not all(isinstance(entry, dict) for entry in logs):
        raise InputError(path, "logs", "each log must be a [[logs]] table")
    specs = tuple(log_spec_from_toml(entry, directory, number) for number, entry in enumerate(logs, start=1))
    export = _section(raw, "export", _EXPORT_KEYS, path, "must be an [export] table, e.g. attributes = [\"site\"]")
    attributes = export.get("attributes", [])
    if not isinstance(attributes, list) or not all(isinstance(name, str) and name for name in attributes):
        raise InputError(path, "export.attributes", "must be a list of roster column names, e.g. [\"site\", \"cohort\"]")
    scheme = load_scheme(directory / SCHEME_FILE)
    roster, warnings = load_roster(directory / ROSTER_FILE)
    for text in warnings:
        warn(text, InputWarning, stacklevel=2)
    return Study(
        dir=directory, name=str(name), timezone=timezone, window_seconds=float(window), order=order,
        seed=seed, scheme=scheme, roster=roster, logs=specs, warnings=tuple(warnings),
        export_attributes=tuple(attributes),
    )
