"""Where coders disagree, and how a lead's adjudication of a disagreement is checked.

Adjudications are stored by the study (append-only; the newest per unit and dimension
wins); export decides how they become labels.  This module only lists disagreements,
shows the current adjudication beside each, and validates adjudications on the way in.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from agreement.dimensions import Dimension
from agreement.long_format import read_text_csv
from agreement.tables import ADJUDICATION_INPUT_COLUMNS, DISAGREEMENT_COLUMNS
from sync.errors import InputError


def current_adjudications(adjudications: pd.DataFrame | None) -> pd.Series:
    """The winning code per (unit, dimension): the newest record."""
    if adjudications is None or len(adjudications) == 0:
        return pd.Series(dtype=object, index=pd.MultiIndex.from_tuples([], names=["unit", "dimension"]))
    newest = adjudications.sort_values("at", kind="stable").drop_duplicates(["unit", "dimension"], keep="last")
    return newest.set_index(["unit", "dimension"])["code"].astype(str)


def list_disagreements(units: pd.DataFrame, dimensions: list[Dimension],
                       adjudications: pd.DataFrame | None = None) -> pd.DataFrame:
    """DISAGREEMENTS (agreement/tables.py): every pair of coders whose codes differ on a unit."""
    winners = current_adjudications(adjudications)
    base = units[["unit", "coder", "learner", "time", "note"]]
    pairs = base.merge(base, on="unit", suffixes=("_a", "_b"))
    pairs = pairs[pairs["coder_a"] < pairs["coder_b"]]
    parts = []
    for dimension in dimensions:
        codes = units[["unit", "coder", dimension.name]].rename(columns={dimension.name: "code"})
        with_codes = (pairs
                      .merge(codes.rename(columns={"coder": "coder_a", "code": "code_a"}), on=["unit", "coder_a"])
                      .merge(codes.rename(columns={"coder": "coder_b", "code": "code_b"}), on=["unit", "coder_b"]))
        differ = with_codes["code_a"].notna() & with_codes["code_b"].notna() & (with_codes["code_a"] != with_codes["code_b"])
        found = with_codes[differ.fillna(False).to_numpy(dtype=bool)]
        if len(found) == 0:
            continue
        notes = [" | ".join(note for note in (a, b) if note) for a, b in zip(found["note_a"], found["note_b"])]
        keys = pd.MultiIndex.from_arrays([found["unit"], np.full(len(found), dimension.name)])
        parts.append(pd.DataFrame({
            "unit": found["unit"].to_numpy(), "dimension": dimension.name,
            "learner": found["learner_a"].to_numpy(), "time": found["time_a"].to_numpy(),
            "coder_a": found["coder_a"].to_numpy(), "code_a": found["code_a"].astype(str).to_numpy(),
            "coder_b": found["coder_b"].to_numpy(), "code_b": found["code_b"].astype(str).to_numpy(),
            "notes": notes, "adjudicated_code": winners.reindex(keys).fillna("").to_numpy(),
        }))
    if not parts:
        return pd.DataFrame({column: pd.Series(dtype=object) for column in DISAGREEMENT_COLUMNS})
    return pd.concat(parts, ignore_index=True).sort_values(["time", "unit", "dimension"], kind="stable")[
        list(DISAGREEMENT_COLUMNS)].reset_index(drop=True)


def read_adjudications(path: str | Path, dimensions: list[Dimension], known_units: set[str]) -> pd.DataFrame:
    """The adjudication CSV (unit, dimension, code, adjudicator, reason), every row checked."""
    path = Path(path)
    frame = read_text_csv(path)
    missing = [column for column in ADJUDICATION_INPUT_COLUMNS if column not in frame.columns]
    if missing:
        raise InputError(path, "header", f"missing column {missing[0]!r}; columns are "
                                         f"{', '.join(ADJUDICATION_INPUT_COLUMNS)}")
    frame = frame[list(ADJUDICATION_INPUT_COLUMNS)].apply(lambda column: column.str.strip())
    codes_of = {dimension.name: set(dimension.codes) for dimension in dimensions}
    for number, row in enumerate(frame.itertuples(index=False), start=2):
        where = f"row {number}"
        if row.unit not in known_units:
            raise InputError(path, where, f"unknown unit {row.unit!r}; use a unit id from "
                                          "`fieldmark agree STUDY --disagreements FILE`")
        if row.dimension not in codes_of:
            raise InputError(path, where, f"unknown dimension {row.dimension!r}; the scheme has "
                                          f"{', '.join(sorted(codes_of))}")
        if row.code not in codes_of[row.dimension]:
            raise InputError(path, where, f"code {row.code!r} is not a code of {row.dimension}")
        if not row.adjudicator:
            raise InputError(path, where, "adjudicator must not be empty")
    return frame
