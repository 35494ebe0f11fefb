"""xAPI statements -> EVENTS, per xAPI 1.0.3 (and 2.0 / IEEE 9274.1.1 where it differs).

A file holds a JSON array of statements, or one statement per line (JSON lines).
Mapping (section numbers are xAPI 1.0.3 Part Two):
  learner    actor's Inverse Functional Identifier (2.4.2.3): account.name, else mbox
             (the "mailto:" IRI as written), else mbox_sha1sum, else openid.  Identified
             Groups count as one learner; anonymous Groups (members only) are left out.
  time_ns    timestamp (2.4.7); when a statement has none, stored (2.4.8) -- counted.
             Stamps without an offset are local to the entry's timezone.
  action     verb.id (2.4.3)
  outcome    result.success (2.4.5) true -> "correct", false -> "incorrect"; otherwise
             result.completion true -> "completed"; otherwise "".
  item       object.id (2.4.4) ("" for objects without an id)
  duration_s result.duration, an ISO 8601 duration (4.6): PnW or PnDTnHnMnS with
             fractional seconds.  Years and months have no fixed length, so they are
             refused with the line number.
  source_row the line the statement starts on (JSON lines: its line; array: where the
             statement's object opens).
"""
from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd

from sync.errors import InputError
from sync.event_table import build_events
from sync.local_time import LocalTimeCounts
from sync.log_spec import LogSpec
from sync.plausible_values import check_durations
from sync.time_column import parse_time_column

_DURATION = re.compile(
    r"^P(?:(?P<weeks>\d+(?:[.,]\d+)?)W|(?:(?P<years>\d+(?:[.,]\d+)?)Y)?(?:(?P<months>\d+(?:[.,]\d+)?)M)?"
    r"(?:(?P<days>\d+(?:[.,]\d+)?)D)?(?:T(?:(?P<hours>\d+(?:[.,]\d+)?)H)?(?:(?P<minutes>\d+(?:[.,]\d+)?)M)?"
    r"(?:(?P<seconds>\d+(?:[.,]\d+)?)S)?)?)$"
)
_SECONDS_PER = {"weeks": 604800.0, "days": 86400.0, "hours": 3600.0, "minutes": 60.0, "seconds": 1.0}


def iso_duration_seconds(text: str) -> float:
    """An ISO 8601 duration (xAPI 1.0.3 Part Two 4.6) -> seconds; ValueError if unreadable.

    A decimal comma is accepted as ISO 8601 allows; years and months are refused because
    their length depends on the calendar.
    """
    match = _DURATION.match(text.strip()) if isinstance(text, str) else None
    if match is None or text.strip() in ("P", "PT") or text.strip().endswith("T"):
        raise ValueError(f"{text!r} is not an ISO 8601 duration such as PT1M30.5S")
    parts = match.groupdict()
    if parts["years"] or parts["months"]:
        raise ValueError(f"{text!r} uses years or months, whose length in seconds is not fixed")
    return sum(float(parts[name].replace(",", ".")) * scale for name, scale in _SECONDS_PER.items() if parts[name])


def _statements(path: Path, encoding: str) -> list[tuple[int, object]]:
    """(line, statement) pairs from a JSON array or JSON lines file; InputError on bad JSON."""
    name = str(path)
    try:
        text = path.read_text(encoding=encoding).removeprefix("\ufeff")  # a byte order mark is not JSON
    except UnicodeDecodeError as error:
        raise InputError(name, f"byte {error.start}", f"is not valid {encoding} text; "
                         "set encoding = \"...\" in its [[logs]] entry") from None
    stripped = text.lstrip(" \t\r\n")
    if not stripped:
        raise InputError(name, None, "is empty; export the statements again or remove its [[logs]] entry")
    if stripped.startswith("["):
        start = len(text) - len(stripped)
        decoder = json.JSONDecoder(parse_constant=_refuse_constant)
        try:
            statements, end = decoder.raw_decode(text, start)
        except json.JSONDecodeError as error:
            raise InputError(name, f"line {error.lineno} column {error.colno}",
                             f"malformed JSON ({error.msg}); fix the statement there") from None
        except (ValueError, RecursionError) as error:
            raise InputError(name, None, f"unreadable JSON ({_reason(error)}); export the statements again") from None
        if not isinstance(statements, list):
            raise InputError(name, "line 1", "must be a JSON array of statements or one statement per line")
        if text[end:].strip():
            line = text.count("\n", 0, end) + 1
            raise InputError(name, f"line {line}", "data after the end of the JSON array; a file holds one array "
                             "of statements (or one statement per line): remove the rest or split the file")
        lines = _array_element_lines(text, start, len(statements))
        return list(zip(lines, statements))
    result = []
    for number, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        try:
            result.append((number, json.loads(line, parse_constant=_refuse_constant)))
        except json.JSONDecodeError as error:
            raise InputError(name, f"line {number} column {error.colno}",
                             f"malformed JSON ({error.msg}); each line must hold one whole statement") from None
        except (ValueError, RecursionError) as error:
            raise InputError(name, f"line {number}", f"unreadable JSON ({_reason(error)}); fix the statement") from None
    return result


def _refuse_constant(name: str) -> float:
    raise ValueError(f"{name} is not a JSON number")


def _reason(error: BaseException) -> str:
    return "nested too deeply" if isinstance(error, RecursionError) else str(error).split(";")[0]


# Where the standard fixes a field's JSON type (xAPI 1.0.3 Part Two 2.4.2.3, 2.4.3, 2.4.4, 2.4.5).
_TEXT_FIELDS = (("actor", "account", "name"), ("actor", "mbox"), ("actor", "mbox_sha1sum"), ("actor", "openid"),
                ("verb", "id"), ("object", "id"), ("timestamp",), ("stored",), ("result", "duration"))
_TRUTH_FIELDS = (("result", "success"), ("result", "completion"))


def _type_problem(statement: dict) -> str | None:
    """The first field whose JSON type the standard forbids, as a sentence; None when all fit."""
    for fields, wanted, kind in ((_TEXT_FIELDS, str, "text"), (_TRUTH_FIELDS, bool, "true or false")):
        for path in fields:
            value: object = statement
            for key in path:
                value = value.get(key) if isinstance(value, dict) else None
            if value is not None and not isinstance(value, wanted):
                return f"{'.'.join(path)} must be {kind}, not {type(value).__name__} {str(value)[:40]!r}"
    return None


def _array_element_lines(text: str, start: int, count: int) -> list[int]:
    """The line each top-level element of the JSON array at ``start`` begins on."""
    decoder = json.JSONDecoder()
    lines, position = [], start + 1
    line = text.count("\n", 0, position) + 1
    whitespace = re.compile(r"[\s,]*")
    for _ in range(count):
        skip = whitespace.match(text, position).end()
        line += text.count("\n", position, skip)
        lines.append(line)
        _, end = decoder.raw_decode(text, skip)
        line += text.count("\n", skip, end)
        position = end
    return lines


def _learner(actor: object) -> str | None:
    """The actor's Inverse Functional Identifier (xAPI 1.0.3 Part Two 2.4.2.3), or None."""
    if not isinstance(actor, dict):
        return None
    account = actor.get("account")
    if isinstance(account, dict) and account.get("name"):
        return str(account["name"])
    for key in ("mbox", "mbox_sha1sum", "openid"):
        if actor.get(key):
            return str(actor[key])
    return None


def _outcome(result: dict) -> str:
    if result.get("success") is True:
        return "correct"
    if result.get("success") is False:
        return "incorrect"
    if result.get("completion") is True:
        return "completed"
    return ""


def read_xapi_log(spec: LogSpec, path: Path) -> tuple[pd.DataFrame, LocalTimeCounts, list[str]]:
    """One file of xAPI statements -> (EVENTS rows, DST counts, warnings)."""
    name = str(path)
    records = _statements(path, spec.encoding)
    if not records:
        raise InputError(name, None, "holds no statements; export them again or remove its [[logs]] entry")
    columns: dict[str, list] = {key: [] for key in ("learner", "time", "action", "outcome", "item", "duration", "row")}
    no_actor = used_stored = 0
    for line, statement in records:
        if not isinstance(statement, dict):
            raise InputError(name, f"line {line}", "is not a statement (a JSON object); fix or remove it")
        problem = _type_problem(statement)
        if problem:
            raise InputError(name, f"line {line}", f"{problem} (xAPI 1.0.3 Part Two 2.4); fix or remove the statement")
        learner = _learner(statement.get("actor"))
        if learner is None:
            no_actor += 1
            continue
        verb = statement.get("verb")
        if not isinstance(verb, dict) or not verb.get("id"):
            raise InputError(name, f"line {line}", "statement has no verb.id (xAPI 1.0.3 Part Two 2.4.3); fix or remove it")
        stamp = statement.get("timestamp")
        if not stamp:
            stamp = statement.get("stored")
            used_stored += 1
        target = statement.get("object")
        result = statement.get("result") if isinstance(statement.get("result"), dict) else {}
        duration = np.nan
        if result.get("duration") is not None:
            try:
                duration = iso_duration_seconds(result["duration"])
            except ValueError as error:
                raise InputError(name, f"line {line} result.duration", str(error)) from None
        columns["learner"].append(learner)
        columns["time"].append(stamp if isinstance(stamp, str) else None)
        columns["action"].append(str(verb["id"]))
        columns["outcome"].append(_outcome(result))
        columns["item"].append(str(target.get("id", "")) if isinstance(target, dict) else "")
        columns["duration"].append(duration)
        columns["row"].append(line)
    warnings = []
    if no_actor:
        warnings.append(f"{name}: {no_actor} statements left out: actor has no identifier (anonymous group)")
    if used_stored:
        warnings.append(f"{name}: {used_stored} statements have no timestamp; their stored time was used")
    rows = np.asarray(columns["row"], dtype=np.int64)
    if rows.size == 0:
        raise InputError(name, None, "holds no statement with an identified actor")
    check_durations(np.asarray(columns["duration"], dtype=np.float64), name, "result.duration", rows, "line")
    time_ns, counts = parse_time_column(pd.Series(columns["time"], dtype="str"), "iso", spec.timezone,
                                        name, "timestamp", rows, row_word="line")
    events = build_events(learner=columns["learner"], time_ns=time_ns, action=columns["action"],
                          outcome=columns["outcome"], item=columns["item"], skill=None,
                          duration_s=np.asarray(columns["duration"], dtype=np.float64), source=name, source_row=rows)
    return events, counts, warnings
