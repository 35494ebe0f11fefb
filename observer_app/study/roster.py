"""The roster: who can be observed, what the coder sees for them, and their log id.

roster.csv columns: learner, label, log_id, then any attribute columns (site, cohort ...).
Lines starting with '#' are comments.  Labels are what appears on screen: a seat or
an alias, never a full name unless the study deliberately puts one there.
"""
from __future__ import annotations

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
        records.append(record)
    if not records:
        raise InputError(path, None, "no learners; add one line per learner below the header")
    return pd.DataFrame.from_records(records, columns=header).astype("string"), warnings
