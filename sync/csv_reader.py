"""CSV logs -> EVENTS: only the mapped columns, read as text, delimiter detected unless given."""
from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pandas as pd

from sync.errors import InputError
from sync.event_table import build_events
from sync.local_time import LocalTimeCounts
from sync.log_spec import LogSpec
from sync.plausible_values import check_durations
from sync.time_column import parse_time_column

DELIMITER_CANDIDATES = ",;\t|"
SNIFF_BYTES = 64 * 1024


def detect_delimiter(sample: str) -> str:
    """The delimiter of a CSV sample: the csv module's sniffer over , ; tab |, else comma."""
    try:
        return csv.Sniffer().sniff(sample, delimiters=DELIMITER_CANDIDATES).delimiter
    except csv.Error:
        return ","


def _encoding(spec: LogSpec) -> str:
    # A UTF-8 byte order mark (spreadsheet exports) is not part of the first column's name.
    return "utf-8-sig" if spec.encoding.lower().replace("_", "-") in ("utf-8", "utf8") else spec.encoding


def read_csv_log(spec: LogSpec, path: Path) -> tuple[pd.DataFrame, LocalTimeCounts, list[str]]:
    """One CSV file -> (EVENTS rows, DST counts, warnings).  Raises InputError on bad input."""
    name = str(path)
    encoding = _encoding(spec)
    try:
        with open(path, encoding=encoding, newline="") as handle:
            sample = handle.read(SNIFF_BYTES)
    except UnicodeDecodeError as error:
        raise InputError(name, f"byte {error.start}", f"is not valid {spec.encoding} text; "
                         "set encoding = \"...\" (e.g. \"cp1252\") in its [[logs]] entry") from None
    if not sample.strip():
        raise InputError(name, None, "is empty; export the log again or remove its [[logs]] entry")
    delimiter = spec.delimiter or detect_delimiter(sample)
    try:
        header = next(csv.reader([sample.splitlines()[0]], delimiter=delimiter))
    except StopIteration:
        header = []
    header = [column.strip() for column in header]
    missing = [f"{role} = {column!r}" for role, column in spec.columns.items() if column not in header]
    if missing:
        raise InputError(name, "header", f"has no column for {', '.join(missing)}; the file has "
                         f"{', '.join(header) or 'no columns'} -- fix [logs.columns] in study.toml")
    repeated = sorted({column for column in spec.columns.values() if header.count(column) > 1})
    if repeated:
        raise InputError(name, "header", f"column {repeated[0]!r} appears more than once; rename the other "
                         "so it is clear which one to read")
    wanted = sorted(set(spec.columns.values()))
    try:
        table = pd.read_csv(path, sep=delimiter, encoding=encoding, usecols=wanted, dtype="str",
                            keep_default_na=False, skipinitialspace=True)
    except UnicodeDecodeError as error:
        raise InputError(name, f"byte {error.start}", f"is not valid {spec.encoding} text; "
                         "set encoding = \"...\" (e.g. \"cp1252\") in its [[logs]] entry") from None
    except (pd.errors.ParserError, csv.Error) as error:
        raise InputError(name, None, f"cannot be read as CSV ({str(error).strip()}); check quotes and "
                         "delimiters on that line") from None
    if table.empty:
        raise InputError(name, None, "has a header but no rows; export the log again or remove its [[logs]] entry")
    rows = np.arange(1, len(table) + 1, dtype=np.int64)
    return events_from_columns(table, spec, name, rows)


def events_from_columns(table: pd.DataFrame, spec: LogSpec, name: str,
                        rows: np.ndarray) -> tuple[pd.DataFrame, LocalTimeCounts, list[str]]:
    """A table holding the mapped columns -> (EVENTS rows, DST counts, warnings).

    Shared by the CSV and Parquet readers: it decides what an empty learner or a
    non-numeric duration means.
    """
    columns = spec.columns
    warnings: list[str] = []
    time_ns, counts = parse_time_column(table[columns["time"]], spec.time_format, spec.timezone,
                                        name, columns["time"], rows)
    duration = None
    if "duration" in columns:
        duration = _durations(table[columns["duration"]], name, columns["duration"], rows)

    def role(key: str):
        return table[columns[key]] if key in columns else None

    events = build_events(learner=role("learner"), time_ns=time_ns, action=role("action"),
                          outcome=role("outcome"), item=role("item"), skill=role("skill"),
                          duration_s=duration, source=name, source_row=rows)
    no_learner = (events["learner"] == "").to_numpy()
    if no_learner.any():
        warnings.append(f"{name}: {int(no_learner.sum())} rows without a learner were left out "
                        f"(first row {int(rows[np.flatnonzero(no_learner)[0]])})")
        events = events.loc[~no_learner]
        events["learner"] = events["learner"].cat.remove_unused_categories()
    return events, counts, warnings


def _durations(values: pd.Series, name: str, column: str, rows: np.ndarray) -> np.ndarray:
    if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values.dtype):
        seconds = values.to_numpy(dtype=np.float64, na_value=np.nan)
        check_durations(seconds, name, column, rows)
        return seconds
    text = values.astype("str").str.strip()
    numbers = pd.to_numeric(text.where(text != ""), errors="coerce")
    bad = (numbers.isna() & text.notna() & (text != "")).to_numpy()
    if bad.any():
        first = np.flatnonzero(bad)[0]
        raise InputError(name, f"column {column}, row {int(rows[first])}",
                         f"{text.iloc[first][:40]!r} is not a number of seconds")
    seconds = numbers.to_numpy(dtype=np.float64, na_value=np.nan)
    check_durations(seconds, name, column, rows)
    return seconds
