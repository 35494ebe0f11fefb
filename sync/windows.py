"""Observations -> windows on the log's clock (the WINDOWS table of sync/tables.py).

What a window covers is decided here and nowhere else:
  anchor="start" (default): [window_start - before_s, window_end) -- the observed window
      itself when before_s is 0 -- or [window_start - before_s, window_start + after_s)
      when after_s is given;
  anchor="coded": [coded_at - before_s, coded_at + after_s) (after_s defaults to 0).
How device time maps onto the log's clock is also decided here, once, for every verb
(``observations_on_log_clock``; agree, adjudicate, export and the demo all pair and cut
windows from its columns): live observations go through their session's clock model
(key ``device/session_id``) or else their device's (key ``device``), sync/clock_sessions.py;
replay observations (mode "replay") were coded against the log itself, so their window
times are already log times and are taken as they are.  Start is inclusive, end
exclusive, so back-to-back windows never share an event.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from sync.clock import NAT, ClockModel, identity_model
from sync.clock_sessions import model_for
from sync.tables import WINDOW_EXTRA_COLUMNS
from sync.time_column import datetime_column_ns

ANCHORS: tuple[str, ...] = ("start", "coded")


def _models_per_row(observations: pd.DataFrame, clock_models: dict[str, ClockModel],
                    warnings: list[str]) -> list[tuple[np.ndarray, ClockModel | None]]:
    """(row mask, model) per live (device, session); model None for replay rows (already
    on the log's clock).  A session's own model wins over its device's (``model_for``).

    Live devices without a model get the identity model, and its warning is added
    (callers that must not guess refuse such devices first).
    """
    devices = observations["device"].astype(str).to_numpy()
    sessions = (observations["session_id"].astype(str).to_numpy() if "session_id" in observations
                else np.full(len(observations), ""))
    replay = ((observations["mode"].astype(str) == "replay").to_numpy()
              if "mode" in observations else np.zeros(len(observations), bool))
    groups: list[tuple[np.ndarray, ClockModel | None]] = []
    if replay.any():
        groups.append((replay, None))
    for device, session_id in sorted(set(zip(devices[~replay], sessions[~replay]))):
        model = model_for(clock_models, device, session_id)
        if model is None:
            model = identity_model(device)
            warnings.extend(w for w in model.warnings if w not in warnings)
        groups.append(((devices == device) & (sessions == session_id) & ~replay, model))
    return groups


def _to_log(instants: np.ndarray, model: ClockModel | None) -> np.ndarray:
    return instants if model is None else model.to_log_ns(instants)


def observations_on_log_clock(observations: pd.DataFrame, clock_models: dict[str, ClockModel]) -> pd.DataFrame:
    """``observations`` (OBSERVATIONS of observer_app/study/tables.py) plus log_start_ns and
    log_end_ns: each window's bounds as int64 UTC ns on the log's clock.

    The one mapping of device time onto the log's clock.  Replay rows are already on the
    log's clock.  Live rows of a device without a model keep their device times (identity
    model), and ``result.attrs["warnings"]`` says so.  Rows without window bounds get the
    int64-minimum NaT sentinel.
    """
    warnings: list[str] = []
    result = observations.copy()
    window_start, window_end = (datetime_column_ns(result[column]) for column in ("window_start", "window_end"))
    start_ns, end_ns = window_start.copy(), window_end.copy()
    for rows, model in _models_per_row(result, clock_models, warnings):
        start_ns[rows] = _to_log(window_start[rows], model)
        end_ns[rows] = _to_log(window_end[rows], model)
    result["log_start_ns"] = start_ns
    result["log_end_ns"] = end_ns
    result.attrs["warnings"] = warnings
    return result


def observations_to_windows(observations: pd.DataFrame, clock_models: dict[str, ClockModel],
                            roster: pd.DataFrame, anchor: str = "start", before_s: float = 0.0,
                            after_s: float | None = None) -> pd.DataFrame:
    """Every observation with log_id, start_ns, end_ns, coded_ns on the log's clock.

    ``observations`` has the OBSERVATIONS columns (observer_app/study/tables.py); ``roster``
    the columns learner and log_id; ``clock_models`` is keyed ``device`` or
    ``device/session_id`` (sync/tables.py).  Devices without a model are mapped with the
    identity model (callers that must not guess refuse them first).  Rows without window_start/window_end are left out.  What was assumed or left
    out is listed in ``result.attrs["warnings"]``.  Raises ValueError for an unknown
    anchor or a window that would not have positive length.
    """
    if anchor not in ANCHORS:
        raise ValueError(f"anchor must be one of {ANCHORS}, got {anchor!r}")
    if anchor == "coded" and before_s + (after_s or 0.0) <= 0:
        raise ValueError("a window around coded_at needs before_s or after_s > 0")
    if anchor == "start" and after_s is not None and before_s + after_s <= 0:
        raise ValueError("before_s + after_s must be > 0")
    warnings: list[str] = []
    complete = observations["window_start"].notna() & observations["window_end"].notna()
    if not complete.all():
        warnings.append(f"{int((~complete).sum())} observations without window bounds were left out")
    result = observations.loc[complete].copy()
    log_ids = dict(zip(roster["learner"].astype(str), roster["log_id"].astype(str)))
    result["log_id"] = result["learner"].astype(str).map(log_ids).fillna("").astype(str)
    unknown = sorted(set(result.loc[result["log_id"] == "", "learner"].astype(str)))
    if unknown:
        warnings.append(f"learners not in the roster (no log_id): {', '.join(unknown[:10])}")
    start_ns = np.zeros(len(result), dtype=np.int64)
    end_ns = np.zeros(len(result), dtype=np.int64)
    coded_ns = np.full(len(result), NAT, dtype=np.int64)
    window_start, window_end, coded_at = (datetime_column_ns(result[column]) for column in ("window_start", "window_end", "coded_at"))
    before, after = round(before_s * 1e9), None if after_s is None else round(after_s * 1e9)
    for rows, model in _models_per_row(result, clock_models, warnings):
        if anchor == "start":
            begin = window_start[rows] - before
            finish = window_end[rows] if after is None else window_start[rows] + after
        else:
            begin = coded_at[rows] - before
            finish = coded_at[rows] + (after or 0)
        start_ns[rows] = _to_log(begin, model)
        end_ns[rows] = _to_log(finish, model)
        coded_ns[rows] = _to_log(coded_at[rows], model)
    dropped = (start_ns == NAT) | (end_ns == NAT)
    result["start_ns"] = start_ns
    result["end_ns"] = end_ns
    result["coded_ns"] = pd.arrays.IntegerArray(coded_ns, coded_ns == NAT)
    if dropped.any():
        warnings.append(f"{int(dropped.sum())} observations without coded_at were left out (anchor 'coded')")
        result = result.loc[~dropped]
    columns = [c for c in observations.columns if c not in WINDOW_EXTRA_COLUMNS] + list(WINDOW_EXTRA_COLUMNS)
    result = result[columns].reset_index(drop=True)
    result.attrs["warnings"] = warnings
    return result
