"""How two coders' observations are paired into units: the one home of that decision.

Every rule reads the windows on the log's clock (the log_start_ns / log_end_ns columns
of ``sync.windows.observations_on_log_clock``), never a device's own clock, so every
verb that pairs gets the same units whatever the laptops' clocks say.  Rules, in order:
1. Live observations of a paired run: same pairing key (the session's ``pairing_id``
   when the column is there and filled, else ``paired_start``), ``slot`` and learner --
   and only when their windows overlap on the log's clock.  A paired-run group whose
   windows do not overlap stays unpaired (``PairingReport.paired_run_not_overlapping``
   counts its observations): the coders saw the learner at different moments.
2. Other live observations: same learner, window starts at most the tolerance apart
   (``pairing_tolerance_s``: half a window), one to one, nearest first (a unit never
   holds two rows of one coder, and all its window starts lie within the tolerance of
   each other).
3. Replay observations: same clip.
Observations left alone are counted as unmatched, per coder.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from itertools import groupby
from operator import itemgetter

import numpy as np
import pandas as pd

from agreement.tables import (
    MATCHED_BY_CLIP, MATCHED_BY_SLOT, MATCHED_BY_TIME, UNIT_COLUMNS,
)

PAIRING_TOLERANCE_WINDOWS = 0.5
"""How far apart two coders' window starts may be, in windows, to be one unit (common practice)."""
LOG_CLOCK_COLUMNS: tuple[str, ...] = ("log_start_ns", "log_end_ns")


def pairing_tolerance_s(window_seconds: float) -> float:
    """The pairing tolerance of a study whose windows last ``window_seconds``."""
    return PAIRING_TOLERANCE_WINDOWS * float(window_seconds)


@dataclass(frozen=True)
class PairingReport:
    """What pairing did with every observation."""

    observations: int
    units: int
    paired_observations: int
    unmatched: int
    unmatched_by_coder: dict[str, int] = field(default_factory=dict)
    units_by_method: dict[str, int] = field(default_factory=dict)
    paired_run_not_overlapping: int = 0  # observations of paired runs left unpaired: no overlap on the log's clock
    clock_shift_hints: tuple[dict[str, object], ...] = ()  # see ``clock_shift_hints``

    def as_dict(self) -> dict[str, object]:
        return {
            "observations": self.observations, "units": self.units,
            "paired_observations": self.paired_observations, "unmatched": self.unmatched,
            "unmatched_by_coder": self.unmatched_by_coder, "units_by_method": self.units_by_method,
            "paired_run_not_overlapping": self.paired_run_not_overlapping,
            "clock_shift_hints": list(self.clock_shift_hints),
        }


def unit_id(observation_ids: list[str]) -> str:
    """Stable unit id: the same observations give the same id on every run."""
    return hashlib.sha1("|".join(sorted(observation_ids)).encode("utf-8")).hexdigest()[:12]


def _newest_per_key(rows: pd.DataFrame, key: list[str]) -> pd.DataFrame:
    """One row per key and coder: the most recently coded one."""
    return rows.sort_values("coded_at", kind="stable").drop_duplicates(key + ["coder"], keep="last")


def _group_by_key(rows: pd.DataFrame, key: list[str], overlapping: bool = False) -> tuple[pd.Series, pd.Index]:
    """Group number of the rows whose key was coded by two or more coders, and the rows of
    groups set aside because their windows share no stretch of the log's clock (only
    looked at when ``overlapping``)."""
    rows = _newest_per_key(rows, key)
    by_key = rows.groupby(key, dropna=False, sort=False)
    coders = by_key["coder"].transform("nunique")
    together = coders >= 2
    apart = pd.Series(False, index=rows.index)
    if overlapping:
        apart = together & (by_key["log_start_ns"].transform("max") >= by_key["log_end_ns"].transform("min"))
    grouped = rows[together & ~apart]
    groups = pd.Series(grouped.groupby(key, dropna=False, sort=False).ngroup().to_numpy(), index=grouped.index)
    return groups, rows.index[apart.to_numpy(dtype=bool)]


def _pairing_key(live: pd.DataFrame) -> pd.Series:
    """The paired run a live row belongs to: its pairing_id when filled, else its paired start; NA when solo."""
    started = live["paired_start"]
    key = pd.Series(pd.NA, index=live.index, dtype="string")
    key[started.notna()] = "start:" + _datetime_ns(started[started.notna()]).astype(str)
    if "pairing_id" in live:
        given = live["pairing_id"].astype("string").fillna("").str.strip()
        key = key.mask(given.ne(""), "id:" + given)
    return key


def _datetime_ns(values: pd.Series) -> pd.Series:
    """A UTC datetime column as int64 ns (same index)."""
    return pd.Series(pd.to_datetime(values, utc=True).dt.as_unit("ns").array.asi8, index=values.index)


def _candidate_edges(rows: pd.DataFrame, tolerance_ns: int) -> pd.DataFrame:
    """Pairs of rows (same learner, different coders, starts within tolerance), nearest first."""
    frame = pd.DataFrame({
        "row": np.arange(len(rows)),
        "learner": rows["learner"].astype(str).to_numpy(),
        "coder": rows["coder"].astype(str).to_numpy(),
        "start": rows["log_start_ns"].to_numpy(dtype=np.int64),
    })
    frame["bucket"] = frame["start"] // max(tolerance_ns, 1)
    edges = []
    for shift in (0, 1):
        right = frame.assign(bucket=frame["bucket"] - shift)
        merged = frame.merge(right, on=["learner", "bucket"], suffixes=("_a", "_b"))
        keep = (merged["coder_a"] != merged["coder_b"]) & (merged["row_a"] < merged["row_b"] if shift == 0 else True)
        edges.append(merged[keep])
    edges = pd.concat(edges, ignore_index=True)
    edges["gap"] = (edges["start_a"] - edges["start_b"]).abs()
    edges = edges[edges["gap"] <= tolerance_ns]
    edges = edges.assign(first=np.minimum(edges["row_a"], edges["row_b"]), second=np.maximum(edges["row_a"], edges["row_b"]))
    return edges.drop_duplicates(["first", "second"]).sort_values(["gap", "first", "second"], kind="stable")


def _match_by_time(rows: pd.DataFrame, tolerance_ns: int) -> np.ndarray:
    """Group number per row (-1 when unmatched): greedy nearest-first, one row per coder per group.

    The candidate edges are found vectorised; accepting them in order is inherently
    sequential (each merge changes what later edges may do), so that loop is plain
    Python over small per-group summaries.
    """
    group = list(range(len(rows)))
    members: dict[int, list[int]] = {row: [row] for row in range(len(rows))}
    coders = rows["coder"].astype(str).tolist()
    group_coders = {row: {coders[row]} for row in range(len(rows))}
    starts = rows["log_start_ns"].to_numpy(dtype=np.int64).tolist()
    earliest, latest = list(starts), list(starts)
    edges = _candidate_edges(rows, tolerance_ns)
    for first, second in zip(edges["first"].tolist(), edges["second"].tolist()):
        left, right = group[first], group[second]
        if left == right or group_coders[left] & group_coders[right]:
            continue
        if max(latest[left], latest[right]) - min(earliest[left], earliest[right]) > tolerance_ns:
            continue
        for row in members[right]:
            group[row] = left
        members[left] += members.pop(right)
        group_coders[left] |= group_coders.pop(right)
        earliest[left], latest[left] = min(earliest[left], earliest[right]), max(latest[left], latest[right])
    group = np.asarray(group, dtype=np.int64)
    sizes = np.bincount(group, minlength=len(rows))
    return np.where(sizes[group] >= 2, group, -1)


def pair_observations(observations: pd.DataFrame, dimensions: list[str],
                      tolerance_s: float) -> tuple[pd.DataFrame, PairingReport]:
    """UNITS table (agreement/tables.py) and a report from an OBSERVATIONS table on the
    log's clock (its log_start_ns and log_end_ns columns, ``sync.windows.observations_on_log_clock``).

    ``tolerance_s`` is how far apart two coders' window starts may be to count as one
    unit when they did not code a paired run (``pairing_tolerance_s``: half a window).
    """
    missing = [column for column in LOG_CLOCK_COLUMNS if column not in observations]
    if missing:
        raise ValueError(f"observations need {', '.join(LOG_CLOCK_COLUMNS)} (sync.windows.observations_on_log_clock)")
    tolerance_ns = int(round(tolerance_s * 1e9))
    observations = observations.reset_index(drop=True)
    live = observations[observations["mode"] == "live"]
    replay = observations[(observations["mode"] == "replay") & (observations["clip"].fillna("") != "")]
    live = live.assign(_run=_pairing_key(live))
    slotted = live[live["_run"].notna() & live["slot"].notna()]

    slot_groups, apart = _group_by_key(slotted, ["_run", "slot", "learner"], overlapping=True)
    clip_groups, _ = _group_by_key(replay, ["clip"])
    loose = live.loc[live.index.difference(slot_groups.index).difference(apart)]
    time_group = _match_by_time(loose.reset_index(drop=True), tolerance_ns) if len(loose) else np.array([], int)
    time_groups = pd.Series(time_group, index=loose.index)
    time_groups = time_groups[time_groups >= 0]

    parts = []
    for method, groups in ((MATCHED_BY_SLOT, slot_groups), (MATCHED_BY_TIME, time_groups),
                           (MATCHED_BY_CLIP, clip_groups)):
        if len(groups):
            part = observations.loc[groups.index].copy()
            part["_group"] = method + ":" + groups.astype(str)
            part["matched_by"] = method
            parts.append(part)
    units = _units_table(parts, dimensions)
    paired = set(units["observation_id"]) if len(units) else set()
    unmatched = observations[~observations["observation_id"].isin(paired)]
    report = PairingReport(
        observations=len(observations), units=int(units["unit"].nunique()) if len(units) else 0,
        paired_observations=len(units), unmatched=len(unmatched),
        unmatched_by_coder={str(k): int(v) for k, v in unmatched["coder"].value_counts().sort_index().items()},
        units_by_method={str(k): int(v) for k, v in
                         units.drop_duplicates("unit")["matched_by"].value_counts().sort_index().items()},
        paired_run_not_overlapping=len(apart),
        clock_shift_hints=clock_shift_hints(unmatched[unmatched["mode"] == "live"], tolerance_ns),
    )
    return units, report


SHIFT_STEP_MINUTES = 30
"""Clock mistakes come in whole time-zone steps: an hour (summer time), half an hour for some zones."""
SHIFT_RANGE_HOURS = 14
"""UTC offsets lie within +-14 h (ISO 8601 allows more; no zone in use does)."""
SHIFT_MIN_SHARE = 0.8
"""A hint needs most of the smaller side's unmatched observations to pair at the shift: coders who
watch the same learners together (a paired run, planned double coding) pair nearly always, while
two independent shuffled schedules pair by chance at about one in as many learners as they rotate."""
SHIFT_PEAK_RATIO = 2.0
"""... and twice as many as at any other shift: two sessions of the same learners an hour apart
pair by chance at many shifts alike (a flat count), a clock an hour off at one (a peak)."""


def clock_shift_hints(unmatched: pd.DataFrame, tolerance_ns: int) -> tuple[dict[str, object], ...]:
    """Device pairs whose unmatched live observations would pair if one clock were whole
    time-zone steps off: the sign of a wrong UTC offset or a summer-time slip.

    A hint, never a decision: pairing itself stays on the stored clock models.  For each
    two devices that observed the same learners, every shift of ``SHIFT_STEP_MINUTES`` up to
    +-``SHIFT_RANGE_HOURS`` h is tried on the second device's window starts; the best shift
    is reported when at least ``SHIFT_MIN_SHARE`` of the smaller side would pair there and
    ``SHIFT_PEAK_RATIO`` times as many as at the runner-up shift.
    """
    if unmatched.empty or "device" not in unmatched:
        return ()
    rows = unmatched.assign(device=unmatched["device"].astype(str), learner=unmatched["learner"].astype(str))
    devices = sorted(rows["device"].unique())
    shifts_ns = np.arange(-SHIFT_RANGE_HOURS * 60, SHIFT_RANGE_HOURS * 60 + 1, SHIFT_STEP_MINUTES,
                          dtype=np.int64) * 60_000_000_000
    shifts_ns = shifts_ns[shifts_ns != 0]
    hints = []
    for position, first in enumerate(devices):
        a = rows[rows["device"] == first]
        for second in devices[position + 1:]:
            b = rows[rows["device"] == second]
            if set(a["coder"].astype(str)) & set(b["coder"].astype(str)):
                continue  # one coder on two devices never pairs with themself
            counts = _pairable_counts(a, b, shifts_ns, tolerance_ns)
            smaller = min(len(a), len(b))
            best = int(np.argmax(counts)) if len(counts) else 0
            runner_up = int(np.partition(counts, -2)[-2]) if len(counts) > 1 else 0
            if counts[best] >= max(2, SHIFT_MIN_SHARE * smaller) and counts[best] >= SHIFT_PEAK_RATIO * runner_up:
                hints.append({"device": second, "other_device": first,
                              "shift_hours": float(shifts_ns[best] / 3.6e12),
                              "would_pair": int(counts[best]), "of": int(smaller)})
    return tuple(hints)


def _pairable_counts(a: pd.DataFrame, b: pd.DataFrame, shifts_ns: np.ndarray, tolerance_ns: int) -> np.ndarray:
    """Per shift: how many of b's observations (shifted) start within the tolerance of one of a's, same learner."""
    counts = np.zeros(len(shifts_ns), dtype=np.int64)
    b_by_learner = b.groupby("learner")["log_start_ns"]
    for learner, a_starts in a.groupby("learner")["log_start_ns"]:
        if learner not in b_by_learner.groups:
            continue
        own = np.sort(a_starts.to_numpy(dtype=np.int64))
        other = b_by_learner.get_group(learner).to_numpy(dtype=np.int64)
        moved = other[None, :] + shifts_ns[:, None]  # shifts x observations, vectorised
        right = np.clip(np.searchsorted(own, moved), 0, len(own) - 1)
        left = np.clip(right - 1, 0, len(own) - 1)
        gap = np.minimum(np.abs(own[right] - moved), np.abs(moved - own[left]))
        counts += (gap <= tolerance_ns).sum(axis=1)
    return counts


def _units_table(parts: list[pd.DataFrame], dimensions: list[str]) -> pd.DataFrame:
    """Long UNITS table from the grouped observation rows."""
    columns = list(UNIT_COLUMNS) + list(dimensions)
    if not parts:
        return pd.DataFrame({column: pd.Series(dtype="string") for column in columns}).assign(
            time=pd.Series(dtype="datetime64[ns, UTC]"))
    rows = pd.concat(parts, ignore_index=True)
    ids = rows["observation_id"].astype(str)
    ordered = pd.DataFrame({"group": rows["_group"], "id": ids}).sort_values(["group", "id"], kind="stable")
    unit_of_group = pd.Series({
        group: unit_id([observation for _, observation in members])
        for group, members in groupby(zip(ordered["group"], ordered["id"]), key=itemgetter(0))
    })
    units = pd.DataFrame({
        "unit": rows["_group"].map(unit_of_group),
        "coder": rows["coder"].astype(str),
        "learner": rows["learner"].astype(str),
        "session_id": rows["session_id"].fillna("").astype(str),
        "time": pd.to_datetime(rows["log_start_ns"].to_numpy(dtype=np.int64), unit="ns", utc=True),
        "observation_id": ids,
        "matched_by": rows["matched_by"],
        "note": rows["note"].fillna("").astype(str) if "note" in rows else "",
    })
    for dimension in dimensions:
        units[dimension] = rows[dimension].astype("string")
    return units.sort_values(["time", "unit", "coder"], kind="stable").reset_index(drop=True)[columns]
