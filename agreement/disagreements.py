"""Where coders disagree, and how a lead's adjudication of a disagreement is checked.

Adjudications are stored by the study (append-only), keyed by the observations they
settle and the dimension, so that re-pairing (a refit clock, a third coder's import, a
new pairing rule) never orphans them silently: ``place_adjudications`` puts each on the
unit that now holds all its observations, and names those no unit holds.  The newest per
unit and dimension wins; export decides how they become labels.  This module also lists
disagreements, shows the current adjudication beside each, and validates adjudications
on the way in.
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


def place_adjudications(adjudications: pd.DataFrame, units: pd.DataFrame,
                        legacy: dict[str, str] | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(placed, unplaced) ADJUDICATIONS (observer_app/study/tables.py) against UNITS.

    An adjudication settles the observations in its ``observations`` column (ids joined
    by "|"); one stored before that column existed ("") settles ``legacy[unit]`` when
    known.  It is placed on the unit that now holds every one of them: ``placed`` has
    ``unit`` set to that unit.  ``unplaced`` holds the rest, except those a newer placed
    adjudication of the same dimension sharing an observation has superseded (the lead
    adjudicated the new unit again).  Both carry the settled ids in ``observations``.
    """
    legacy = legacy or {}
    frame = adjudications.copy()
    given = frame["observations"].astype("string").fillna("")
    frame["observations"] = given.mask(given.eq(""), frame["unit"].astype(str).map(legacy).astype("string").fillna(""))
    settled = frame[["adjudication_id", "observations"]].assign(
        observation_id=frame["observations"].str.split("|")).explode("observation_id")
    settled = settled[settled["observation_id"].fillna("") != ""]
    where = units.drop_duplicates("observation_id").set_index("observation_id")["unit"]
    settled["now"] = settled["observation_id"].map(where)
    per = settled.groupby("adjudication_id")["now"].agg(["size", "count", "nunique", "first"])
    one_unit = per[(per["size"] == per["count"]) & (per["nunique"] == 1)]["first"]
    placed_mask = frame["adjudication_id"].isin(one_unit.index)
    placed = frame[placed_mask].assign(unit=frame.loc[placed_mask, "adjudication_id"].map(one_unit))
    unplaced = frame[~placed_mask]
    if len(unplaced) and len(placed):
        newer = settled.merge(frame[["adjudication_id", "dimension", "at"]], on="adjudication_id")
        late = newer[newer["adjudication_id"].isin(placed["adjudication_id"])]
        old = newer[newer["adjudication_id"].isin(unplaced["adjudication_id"])]
        covered = old.merge(late, on=["observation_id", "dimension"], suffixes=("", "_new"))
        superseded = set(covered.loc[covered["at_new"] > covered["at"], "adjudication_id"])
        unplaced = unplaced[~unplaced["adjudication_id"].isin(superseded)]
    return placed.reset_index(drop=True), unplaced.reset_index(drop=True)


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
