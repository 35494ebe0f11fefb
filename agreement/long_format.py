"""Reading reliability data coded elsewhere: a long-format CSV, validated at the boundary.

Columns: ``unit``, ``coder``, one column per dimension (an empty cell is a missing
code), and optionally ``learner`` (the bootstrap cluster; without it every unit is its
own cluster), ``session_id``, ``time`` (ISO 8601) and ``note``.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from agreement.dimensions import LEVELS, Dimension
from agreement.tables import LONG_FORMAT_KEY_COLUMNS, LONG_FORMAT_OPTIONAL_COLUMNS, MATCHED_BY_GIVEN, UNIT_COLUMNS
from sync.csv_header import check_header
from sync.errors import InputError
from sync.plausible_values import RANGE_TEXT, outside_range


def read_text_csv(path: Path) -> pd.DataFrame:
    """A CSV a person wrote, every cell as text ("" when empty), header names stripped."""
    if not path.is_file():
        raise InputError(path, None, "file not found" if not path.exists() else "is not a file; pass a CSV file")
    check_header(path)
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, skipinitialspace=True, encoding="utf-8-sig")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as error:
        raise InputError(path, None, f"not a readable CSV file ({str(error).splitlines()[0]})") from None
    frame.columns = [str(column).strip() for column in frame.columns]
    return frame


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _ordered_codes(path: Path, name: str, present: list[str], level: str, order: list[str] | None) -> tuple[str, ...]:
    """The dimension's codes in order: --order, else numeric order, else (nominal only) sorted."""
    if order:
        unknown = sorted(set(present) - set(order))
        if unknown:
            raise InputError(path, f"column {name}", f"code {unknown[0]!r} is not in --order; add it or fix the file")
        return tuple(order)
    if all(_is_number(code) for code in present):
        return tuple(sorted(present, key=float))
    if level != "nominal":
        raise InputError(path, f"column {name}",
                         f"{level} codes that are not numbers need their order: pass --order lowest,...,highest")
    return tuple(sorted(present))


def read_long_csv(path: str | Path, level: str | None = None,
                  order: list[str] | None = None) -> tuple[pd.DataFrame, list[Dimension]]:
    """UNITS table (agreement/tables.py) and the dimensions found in a long-format CSV."""
    path = Path(path)
    level = level or "nominal"
    if level not in LEVELS:
        raise InputError(None, "--level", f"unknown level {level!r}; use one of {', '.join(LEVELS)}")
    frame = read_text_csv(path)
    for column in LONG_FORMAT_KEY_COLUMNS:
        if column not in frame.columns:
            raise InputError(path, "header", f"missing column {column!r}; a long-format file needs unit, coder "
                                             "and one column per dimension")
    dimension_names = [c for c in frame.columns if c not in LONG_FORMAT_KEY_COLUMNS + LONG_FORMAT_OPTIONAL_COLUMNS]
    if not dimension_names:
        raise InputError(path, "header", "no dimension column; add one column of codes per dimension")
    frame = frame.apply(lambda column: column.str.strip())
    blank_key = (frame["unit"] == "") | (frame["coder"] == "")
    if blank_key.any():
        row = int(np.flatnonzero(blank_key.to_numpy())[0]) + 2
        raise InputError(path, f"row {row}", "unit and coder must not be empty")
    repeated = frame.duplicated(["unit", "coder"])
    if repeated.any():
        row = int(np.flatnonzero(repeated.to_numpy())[0]) + 2
        raise InputError(path, f"row {row}", f"coder {frame['coder'].iloc[row - 2]!r} coded unit "
                                             f"{frame['unit'].iloc[row - 2]!r} twice; keep one row")
    coders = frame["coder"].nunique()
    if coders < 2:
        raise InputError(path, "column coder", f"{coders} coder found; agreement needs units coded by at least two")
    dimensions = []
    for name in dimension_names:
        present = sorted(set(frame[name]) - {""})
        if not present:
            raise InputError(path, f"column {name}", "holds no codes; fill it in or remove the column")
        codes = _ordered_codes(path, name, present, level, order)
        if level in ("interval", "ratio") and not all(_is_number(code) for code in codes):
            raise InputError(path, f"column {name}", f"{level} codes must be numbers")
        dimensions.append(Dimension(name=name, level=level, codes=codes))
    time = (pd.to_datetime(frame["time"], utc=True, errors="coerce", format="ISO8601")
            if "time" in frame else pd.Series(pd.NaT, index=frame.index, dtype="datetime64[ns, UTC]"))
    if "time" in frame and (time.isna() & (frame["time"] != "")).any():
        row = int(np.flatnonzero((time.isna() & (frame["time"] != "")).to_numpy())[0]) + 2
        raise InputError(path, f"row {row}", "time is not ISO 8601 (e.g. 2026-03-02T09:15:00+01:00)")
    implausible = outside_range(time)
    if implausible.any():
        row = int(np.flatnonzero(implausible.to_numpy())[0]) + 2
        raise InputError(path, f"row {row}", f"time {frame['time'].iloc[row - 2]!r} is not {RANGE_TEXT}; fix the date")
    units = pd.DataFrame({
        "unit": frame["unit"],
        "coder": frame["coder"],
        "learner": frame["learner"].where(frame["learner"] != "", frame["unit"]) if "learner" in frame else frame["unit"],
        "session_id": frame["session_id"] if "session_id" in frame else "",
        "time": time,
        "observation_id": "",
        "matched_by": MATCHED_BY_GIVEN,
        "note": frame["note"] if "note" in frame else "",
    })
    for name in dimension_names:
        units[name] = frame[name].replace("", pd.NA).astype("string")
    return units[list(UNIT_COLUMNS) + dimension_names], dimensions
