"""Which label wins when several coders coded the same window.  The one home of that rule.

Per unit and dimension, in this order:
  1. adjudicated  -- the newest adjudication record for (unit, dimension);
  2. agreed       -- two or more coders coded it and all gave the same code;
  3. single       -- exactly one coder coded it (nothing to disagree with);
  4. the coders disagree -> the policy:
       "first-coder": the code of the unit's first observation (earliest window start,
                      ties by coder name) that coded the dimension;  source "first-coder"
       "majority":    a code more than half of the coders gave;  source "majority"
                      (no strict majority -> unresolved)
       "agreed-only": unresolved.
A label equal to the dimension's could-not-observe code is dropped (NA, source
"could-not-observe") unless kept on request.  Unresolved labels are NA with source
"unresolved".  Rows whose every label is NA are dropped.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from export.tables import CODERS, LABEL_POLICIES, LABEL_SOURCE_PREFIX, UNIT

REPRESENTATIVE = "observation"
"""Column of the result: index label (in ``windows``) of the unit's first observation."""


def unit_keys(windows: pd.DataFrame) -> pd.Series:
    """The unit of each observation: agreement's ``unit`` when given, else the observation itself."""
    own = windows["observation_id"].astype("string") if "observation_id" in windows else pd.Series(
        windows.index.astype(str), index=windows.index, dtype="string")
    if UNIT not in windows:
        return own
    return windows[UNIT].astype("string").fillna(own)


def resolve_labels(
    windows: pd.DataFrame,
    dimensions: Sequence[str],
    could_not_observe: Mapping[str, str],
    adjudications: pd.DataFrame | None = None,
    policy: str = "first-coder",
    keep_could_not_observe: bool = False,
) -> pd.DataFrame:
    """One row per unit: unit, observation (its first observation's index label in
    ``windows``), coders, then per dimension the label and ``label_source_<dimension>``.

    ``windows``: WINDOWS rows (observation_id, coder, start_ns, one column per dimension,
    optional unit).  ``adjudications``: ADJUDICATIONS rows (unit, dimension, code, at).
    """
    if policy not in LABEL_POLICIES:
        raise ValueError(f"policy must be one of {LABEL_POLICIES}, not {policy!r}")
    ordered = windows.assign(**{UNIT: unit_keys(windows)}).sort_values(
        [UNIT, "start_ns", "coder"], kind="stable")
    grouped = ordered.groupby(UNIT, sort=True)
    heads = grouped.head(1)
    result = pd.DataFrame({
        REPRESENTATIVE: pd.Series(heads.index, index=heads[UNIT].to_numpy()),
        CODERS: grouped.size().astype("int64"),
    })
    result.index.name = UNIT
    for dimension in dimensions:
        codes = ordered[[UNIT, dimension]].dropna()
        label, source = _resolve_dimension(codes, dimension, result.index, policy)
        label, source = _apply_adjudications(label, source, adjudications, dimension)
        dropped = label.eq(could_not_observe.get(dimension, object())).fillna(False)
        if not keep_could_not_observe:
            label = label.mask(dropped)
            source = source.mask(dropped, "could-not-observe")
        result[dimension] = label.astype("string")
        result[LABEL_SOURCE_PREFIX + dimension] = source.astype("string")
    labelled = result[list(dimensions)].notna().any(axis=1)
    return result[labelled].reset_index()


def _resolve_dimension(
    codes: pd.DataFrame, dimension: str, units: pd.Index, policy: str,
) -> tuple[pd.Series, pd.Series]:
    """(label, source) per unit from the coders' codes alone (no adjudication)."""
    per_unit = codes.groupby(UNIT, sort=False)[dimension]
    count = per_unit.size().reindex(units, fill_value=0)
    distinct = per_unit.nunique().reindex(units, fill_value=0)
    first = per_unit.first().reindex(units)
    label = pd.Series(pd.NA, index=units, dtype="object")
    source = pd.Series("unresolved", index=units, dtype="object")
    unanimous = (distinct == 1).to_numpy()
    label[unanimous] = first[unanimous]
    source[unanimous] = np.where(count[unanimous] >= 2, "agreed", "single")
    disagree = (distinct > 1).to_numpy()
    if policy == "first-coder":
        label[disagree] = first[disagree]
        source[disagree] = "first-coder"
    elif policy == "majority":
        tally = codes.groupby([UNIT, dimension], sort=True).size().rename("votes").reset_index()
        top = tally.sort_values([UNIT, "votes"], ascending=[True, False], kind="stable").groupby(UNIT).head(1)
        top = top.set_index(UNIT).reindex(units)
        winner = disagree & (top["votes"].to_numpy(dtype=float) * 2 > count.to_numpy())
        label[winner] = top[dimension][winner]
        source[winner] = "majority"
    return label, source


def _apply_adjudications(
    label: pd.Series, source: pd.Series, adjudications: pd.DataFrame | None, dimension: str,
) -> tuple[pd.Series, pd.Series]:
    """The newest adjudication per unit for this dimension overrides the coders."""
    if adjudications is None or adjudications.empty:
        return label, source
    mine = adjudications[adjudications["dimension"] == dimension]
    newest = mine.sort_values("at", kind="stable").groupby("unit").tail(1).set_index("unit")["code"]
    newest = newest[newest.index.isin(label.index)]
    label = label.copy()
    source = source.copy()
    label[newest.index] = newest.to_numpy()
    source[newest.index] = "adjudicated"
    return label, source
