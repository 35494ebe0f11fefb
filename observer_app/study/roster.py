"""The roster: who can be observed, what the coder sees for them, and their log id.

roster.csv columns: learner, label, log_id, then any attribute columns (site, cohort ...).
Lines starting with '#' are comments.  Labels are what appears on screen: a seat or
an alias, never a full name unless the study deliberately puts one there.
"""
from __future__ import annotations

from collections.abc import Iterable

import csv
import io
from pathlib import Path

import pandas as pd

from sync.errors import InputError

REQUIRED = ("learner", "label", "log_id")


def load_roster(path: str | Path) -> tuple[pd.DataFrame, list[str]]:
    """roster.csv -> (DataFrame of strings in file order, warnings).

    Errors (missing file or column, empty or duplicate learner) raise InputError
    naming the line; a learner without a log_id is only a warning, because live
    coding works without logs and the id can be added later.
    """
    path = Path(path)
    if not path.exists():
        raise InputError(path, None, "file not found; create it with columns learner,label,log_id")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(path, None, "not UTF-8 text; save the file as UTF-8") from None
    except OSError as error:
        raise InputError(path, None, f"cannot be read ({error.strerror}); it must be a CSV file") from None
    numbered = [(number, line) for number, line in enumerate(text.splitlines(), start=1)
                if line.strip() and not line.lstrip().startswith("#")]
    if not numbered:
        raise InputError(path, None, "empty roster; add a header line learner,label,log_id and one line per learner")
    rows = list(csv.reader(io.StringIO("\n".join(line for _, line in numbered))))
    header = [h.strip() for h in rows[0]]
    for column in REQUIRED:
        if column not in header:
            raise InputError(path, f"line {numbered[0][0]}", f"missing column {column!r}; the header must start learner,label,log_id")
    if len(set(header)) != len(header):
        raise InputError(path, f"line {numbered[0][0]}", "a column name appears twice; rename it")
    records = []
    seen: dict[str, int] = {}
    log_id_lines: dict[str, tuple[str, int]] = {}
    warnings: list[str] = []
    for (number, _), row in zip(numbered[1:], rows[1:]):
        if len(row) != len(header):
            raise InputError(path, f"line {number}", f"has {len(row)} fields, the header has {len(header)}; fix the commas")
        record = {column: value.strip() for column, value in zip(header, row)}
        learner = record["learner"]
        if not learner:
            raise InputError(path, f"line {number}", "empty learner id; give every learner an id")
        if learner in seen:
            raise InputError(path, f"line {number}", f"duplicate learner {learner!r} (first on line {seen[learner]}); each learner once")
        seen[learner] = number
        if not record["label"]:
            record["label"] = learner
        if not record["log_id"]:
            warnings.append(f"{path}: line {number}: learner {learner!r} has no log_id; their observations cannot be aligned to the logs")
        elif record["log_id"] in log_id_lines:
            other, line = log_id_lines[record["log_id"]]
            warnings.append(f"{path}: line {number}: learner {learner!r} has log_id {record['log_id']!r}, as learner "
                            f"{other!r} on line {line}; export refuses two observed learners on one log, and so does align when it fits a clock")
        else:
            log_id_lines[record["log_id"]] = (learner, number)
        records.append(record)
    if not records:
        raise InputError(path, None, "no learners; add one line per learner below the header")
    return pd.DataFrame.from_records(records, columns=header).astype("string"), warnings


def shared_log_id_problem(roster: pd.DataFrame, observed: Iterable[str]) -> str | None:
    """One sentence when observed learners share a roster log_id (None when none do).

    Two learners on one log id put both learners' labels on one learner's events: almost
    always a copied line.  Coding may go on with such a roster; aligning and exporting may not."""
    rows = roster[roster["learner"].astype(str).isin(set(map(str, observed)))].dropna(subset=["log_id"])
    rows = rows[rows["log_id"].astype(str) != ""]
    shared = rows[rows["log_id"].duplicated(keep=False)]
    if shared.empty:
        return None
    log_id = shared["log_id"].iloc[0]
    learners = shared.loc[shared["log_id"] == log_id, "learner"].astype(str).tolist()
    return (f"observed learners {', '.join(learners)} share log_id {log_id!r}: each learner's labels would land on "
            "the same log events; give each learner their own log id in roster.csv")
