"""What the study overview and the end-of-session screen count, as plain tables.

Counts are read from the store's current view (corrections applied), so they show
exactly what is durable and what an export would see.
"""
from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

from observer_app.study.importing import IMPORTED_ORDER
from observer_app.study.store import Store


def code_counts(observations: pd.DataFrame, dimensions: Iterable[str]) -> pd.DataFrame:
    """OBSERVATIONS rows -> learner, dimension, code, count (codes in effect; uncoded cells skipped)."""
    dimensions = list(dimensions)
    long = observations.melt(id_vars=["learner"], value_vars=dimensions, var_name="dimension",
                             value_name="code").dropna(subset=["code"])
    if long.empty:
        return pd.DataFrame({"learner": pd.Series(dtype="string"), "dimension": pd.Series(dtype="string"),
                             "code": pd.Series(dtype="string"), "count": pd.Series(dtype="int64")})
    return long.groupby(["learner", "dimension", "code"], observed=True).size().rename("count").reset_index()


def window_counts(observations: pd.DataFrame) -> pd.DataFrame:
    """OBSERVATIONS rows -> learner, windows, coded_windows, missed_windows (no-code rows)."""
    per_learner = observations.groupby("learner", observed=True).agg(
        windows=("observation_id", "size"), missed_windows=("no_code", "sum")).reset_index()
    per_learner["missed_windows"] = per_learner["missed_windows"].astype("int64")
    per_learner["coded_windows"] = per_learner["windows"] - per_learner["missed_windows"]
    return per_learner[["learner", "windows", "coded_windows", "missed_windows"]]


def session_table(store: Store) -> pd.DataFrame:
    """One row per session: coder, device, mode, paired, imported, started_at, ended_at (NaT: open), windows.

    imported: the session came from a CSV (it has no end row, and is not interrupted).
    """
    sessions = store.sessions()
    observations = store.observations([])
    windows = observations.groupby("session_id", observed=True).size()
    table = sessions[["session_id", "coder", "device", "mode", "started_at", "ended_at"]].copy()
    table["paired"] = sessions["paired_start"].notna() | sessions["pairing_id"].notna()
    table["imported"] = (sessions["order"] == IMPORTED_ORDER).to_numpy(dtype=bool)
    table["windows"] = windows.reindex(table["session_id"]).fillna(0).astype("int64").to_numpy()
    return table
