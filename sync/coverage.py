"""Which observed learners the logs cover: the check before labels leave the study.

A label is only worth exporting when the log holds the learner's events in the observed
window.  Two mistakes look like idle learners otherwise: a roster ``log_id`` that the
logs never use (a typo, "N-0001" for "n-0001", a missing "north/" prefix), and events
that exist but fall outside every observed window (a wrong clock model or time zone).
``learner_coverage`` counts, per observed learner, the events in their windows and in
the whole log; ``unmatched_log_ids_problem`` words the first mistake, with a hint when
the ids differ only by case, spaces or a prefix.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa

from sync.sorted_parquet import LearnerBlocks, learner_runs

SHOWN_IDS = 3
COVERAGE_COLUMNS: tuple[str, ...] = ("learner", "log_id", "windows", "windows_without_events",
                                     "events_in_windows", "events_in_logs")


@dataclass(frozen=True)
class Coverage:
    """Per observed learner (COVERAGE_COLUMNS) and the log ids the logs hold."""

    learners: pd.DataFrame
    log_ids_in_logs: tuple[str, ...]

    @property
    def unmatched(self) -> pd.DataFrame:
        """Observed learners whose log_id has no event anywhere in the logs."""
        return self.learners[self.learners["events_in_logs"] == 0]

    @property
    def outside(self) -> pd.DataFrame:
        """Observed learners with events in the logs but none in any observed window."""
        return self.learners[(self.learners["events_in_logs"] > 0) & (self.learners["events_in_windows"] == 0)]

    def summary(self) -> dict[str, int]:
        """Counts only (no ids): what a manifest may keep."""
        frame = self.learners
        return {
            "learners_observed": int(len(frame)),
            "learners_with_events_in_windows": int((frame["events_in_windows"] > 0).sum()),
            "learners_without_events_in_windows": int((frame["events_in_windows"] == 0).sum()),
            "learners_without_events_in_logs": int((frame["events_in_logs"] == 0).sum()),
            "windows": int(frame["windows"].sum()),
            "windows_with_zero_events": int(frame["windows_without_events"].sum()),
        }


def learner_coverage(events: pd.DataFrame | LearnerBlocks, windows: pd.DataFrame) -> Coverage:
    """Coverage of ``windows`` (learner, log_id, start_ns, end_ns on the log's clock: the
    WINDOWS table of sync/tables.py) by ``events`` (EVENTS, sorted by learner and time, or
    the same as blocks of whole learners: only their learner and time columns are read)."""
    log_id = windows["log_id"].astype(str).to_numpy()
    start_ns = windows["start_ns"].to_numpy(dtype=np.int64)
    end_ns = windows["end_ns"].to_numpy(dtype=np.int64)
    windows_of = pd.Series(log_id).groupby(log_id).indices
    in_window = np.zeros(len(windows), dtype=np.int64)
    names, lengths = [], []
    blocks = (events,) if isinstance(events, pd.DataFrame) else events.blocks(["learner", "time_ns"])
    for block in blocks:
        run_starts, run_names, times = _learner_runs(block)
        run_ends = np.append(run_starts[1:], len(times))
        runs = dict(zip(run_names, zip(run_starts, run_ends)))
        for value in windows_of.keys() & runs.keys():  # per learner, vectorised within
            rows, (begin, stop) = windows_of[value], runs[value]
            own = times[begin:stop]
            in_window[rows] = np.searchsorted(own, end_ns[rows], "left") - np.searchsorted(own, start_ns[rows], "left")
        names.append(run_names)
        lengths.append(run_ends - run_starts)
    run_names = np.concatenate(names) if names else np.array([], str)
    per_window = pd.DataFrame({"learner": windows["learner"].astype(str).to_numpy(), "log_id": log_id,
                               "events": in_window})
    table = per_window.groupby(["learner", "log_id"], sort=True).agg(
        windows=("events", "size"), windows_without_events=("events", lambda counts: int((counts == 0).sum())),
        events_in_windows=("events", "sum")).reset_index()
    in_logs = pd.Series(np.concatenate(lengths) if lengths else [], index=run_names, dtype="int64")
    table["events_in_logs"] = table["log_id"].map(in_logs).fillna(0).astype("int64")
    return Coverage(learners=table[list(COVERAGE_COLUMNS)], log_ids_in_logs=tuple(sorted(run_names.tolist())))


def _learner_runs(events: pd.DataFrame | pa.Table) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(first row of each learner's run, the run's learner id as text, every row's time_ns)."""
    times = np.asarray(events["time_ns"], dtype=np.int64)
    if isinstance(events, pa.Table):
        starts, learners = learner_runs(events.column("learner"))
        return starts, learners.astype(str), times
    learner = events["learner"]
    codes, names = ((learner.cat.codes.to_numpy(), learner.cat.categories.astype(str).to_numpy())
                    if isinstance(learner.dtype, pd.CategoricalDtype) else pd.factorize(learner.astype(str)))
    if not len(codes):
        return np.zeros(0, dtype=np.int64), np.array([], str), times
    starts = np.r_[0, np.flatnonzero(codes[1:] != codes[:-1]) + 1]  # events come in runs of one learner
    return starts, np.asarray(names, dtype=object)[codes[starts]].astype(str), times


def _close(missing: str, present: list[str]) -> tuple[str, str] | None:
    """A log id differing from ``missing`` only by case, spaces or a prefix, and how."""
    squeezed = "".join(missing.split()).casefold()
    for other in present:
        squeezed_other = "".join(other.split()).casefold()
        if squeezed_other == squeezed:
            return other, "case or spaces"
        if squeezed and (squeezed_other.endswith(squeezed) or squeezed.endswith(squeezed_other)) and squeezed_other:
            return other, "a prefix"
    return None


def unmatched_log_ids_problem(coverage: Coverage) -> str | None:
    """One sentence for observed learners whose log_id the logs never use (None when all are found)."""
    unmatched = coverage.unmatched
    if unmatched.empty:
        return None
    without = unmatched[unmatched["log_id"].fillna("").astype(str).str.strip() == ""]
    if len(without):
        learners = without["learner"].astype(str).tolist()
        shown = ", ".join(learners[:SHOWN_IDS]) + (f" and {len(learners) - SHOWN_IDS} more"
                                                  if len(learners) > SHOWN_IDS else "")
        return (f"{len(learners)} observed learner(s) have no log_id, or are no longer in roster.csv: {shown}; "
                "add each with their log id (a learner coded once stays in the roster)")
    missing = unmatched["log_id"].tolist()
    present = list(coverage.log_ids_in_logs)
    shown = ", ".join(repr(value) for value in missing[:SHOWN_IDS])
    more = f" and {len(missing) - SHOWN_IDS} more" if len(missing) > SHOWN_IDS else ""
    examples = ", ".join(repr(value) for value in present[:SHOWN_IDS]) or "none"
    hint = ""
    for value in missing:
        close = _close(value, present)
        if close:
            hint = f"; hint: the logs have {close[0]!r} for {value!r} (they differ only by {close[1]})"
            break
    return (f"{len(missing)} observed learner(s) have a log_id with no events anywhere in the logs: {shown}{more} "
            f"(the logs have e.g. {examples}){hint}; fix the log_id column of roster.csv so its ids are the logs' ids")
