"""Benchmarks for sync/: the automatic clock scan and reading a large Parquet log.

    FIELDMARK_PERF=1 /work/venv/bin/python -m pytest tests/perf/test_align_perf.py -s

1. Automatic scan, -300..+300 s in 0.5 s steps (1201 offsets), 20k observations, 5M
   events, side by side with the obvious alternatives (one run, ratios printed):
     ours          sync.clock_scan: the coarse scan, and the whole scan_offset (coarse +
                   drift chunks + final fine scan)
     per-offset    a Python loop over offsets, each offset vectorised with np.searchsorted
                   per learner; timed on 24 offsets, extrapolated to 1201
     naive         a Python loop over offsets and observations, bisect per window; timed
                   on 2 offsets, extrapolated to 1201
   Target (issue 5): the scan <= 5 s.  The data carry a PLANTED offset/drift, so the
   benchmark also prints how close the scan came.
   The gross stage (sync/clock_gross.py, ±14 h on a 10 s grid by FFT) side by side with
   the exact pair counting of the coarse scan over the same 10081 offsets, timed on 200
   windows and extrapolated to all.
2. Reading 10M events from Parquet (five mapped columns of ten), each contender in a fresh
   process so its peak memory (VmHWM) is its own:
     ours     sync.logs.read_logs (projection + dictionary-encoded text + EVENTS table)
     pandas   a plain pd.read_parquet of the whole file
Generated files are cached under /tmp (FIELDMARK_PERF_CACHE).
"""
from __future__ import annotations

import bisect
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

CACHE = Path(os.environ.get("FIELDMARK_PERF_CACHE", "/tmp/fieldmark-perf"))
ROOT = Path(__file__).resolve().parents[2]
SECOND = 1_000_000_000
# PLANTED truth of the scan benchmark's device clock.
PLANTED_OFFSET_S, PLANTED_DRIFT_PPM = 42.7, 30.0
LEARNERS, EVENTS_TOTAL, OBSERVATIONS = 100, 5_000_000, 20_000
DAYS, HOURS = 6, 8.0
RATES = np.array([0.6, 0.15, 0.02, 0.0])  # events/s: rapid, on task, off task, away
CODES = np.array(["rapid_guessing", "on_task", "off_task", "away"])


def simulated_scan_data(seed: int = 5):
    """5M events of 100 learners over six 8-hour days, and 20k coded 20 s windows on a
    device clock that runs PLANTED_OFFSET_S ahead and drifts PLANTED_DRIFT_PPM."""
    from sync.clock import ClockModel
    from sync.event_table import build_events, combine_events

    rng = np.random.default_rng(seed)
    day_s = HOURS * 3600
    base = pd.Timestamp("2026-03-02T07:00:00Z").value
    day_starts = base + np.arange(DAYS) * 86400 * SECOND
    # Hidden states: segments of about 40 s per learner and day.
    segments = int(day_s / 40 * 1.3)
    lengths = np.maximum(5.0, rng.exponential(40.0, (LEARNERS, DAYS, segments)))
    ends = np.cumsum(lengths, axis=2)
    state = rng.choice(4, (LEARNERS, DAYS, segments), p=[0.15, 0.5, 0.2, 0.15])
    rate = RATES[state] * (EVENTS_TOTAL / (LEARNERS * DAYS * day_s * (RATES @ [0.15, 0.5, 0.2, 0.15])))
    counts = rng.poisson(rate * lengths * (ends - lengths < day_s))
    flat = np.repeat(np.arange(counts.size), counts.ravel())
    learner, rest = np.divmod(flat, DAYS * segments)
    day = rest // segments
    seconds = (ends.ravel() - lengths.ravel())[flat] + rng.random(flat.size) * lengths.ravel()[flat]
    time_ns = day_starts[day] + np.round(seconds * SECOND).astype(np.int64)
    ids = np.array([f"n-{i:04d}" for i in range(LEARNERS)])
    events = combine_events([build_events(learner=pd.Categorical.from_codes(learner, ids), time_ns=time_ns,
                                          source="simulated", source_row=np.arange(1, flat.size + 1))])
    # Windows: random learner, random time; the code is the state at the window's middle.
    who = rng.integers(0, LEARNERS, OBSERVATIONS)
    when_day = rng.integers(0, DAYS, OBSERVATIONS)
    start_s = rng.uniform(60, day_s - 80, OBSERVATIONS)
    middle = start_s + 10
    segment = np.array([np.searchsorted(ends[w, d], m) for w, d, m in zip(who, when_day, middle)])
    code = CODES[state[who, when_day, segment]]
    start_log = day_starts[when_day] + np.round(start_s * SECOND).astype(np.int64)
    truth = ClockModel(device="laptop", method="manual", offset_s=PLANTED_OFFSET_S, drift_ppm=PLANTED_DRIFT_PPM,
                       reference_ns=int(base))
    observations = pd.DataFrame({
        "device": "laptop", "log_id": ids[who],
        "window_start": pd.to_datetime(truth.to_device_ns(start_log), utc=True),
        "window_end": pd.to_datetime(truth.to_device_ns(start_log + 20 * SECOND), utc=True),
        "activity": code,
    })
    return events, observations, truth


def naive_counts(times_by_learner, learners, start, end, offset_ns):
    """The obvious loop: one window at a time, bisect in a Python list."""
    counts = []
    for learner, s, e in zip(learners, start, end):
        times = times_by_learner[learner]
        counts.append(bisect.bisect_left(times, e - offset_ns) - bisect.bisect_left(times, s - offset_ns))
    return counts


def per_offset_counts(event_ns, blocks, groups, start, end, offset_ns):
    """One offset at a time, vectorised over windows with np.searchsorted per learner
    (``groups``: learner -> row numbers, prepared once)."""
    counts = np.zeros(len(start), dtype=np.int64)
    for learner, rows in groups.items():
        begin, stop = blocks[learner]
        times = event_ns[begin:stop]
        counts[rows] = np.searchsorted(times, end[rows] - offset_ns) - np.searchsorted(times, start[rows] - offset_ns)
    return counts


def test_automatic_scan_speed():
    from sync.clock_scan import code_event_totals, default_candidates, likelihood_ratio_curve, scan_offset
    from sync.event_table import learner_blocks
    from sync.time_column import datetime_column_ns

    events, observations, truth = simulated_scan_data()
    assert len(events) > 4_500_000 and len(observations) == OBSERVATIONS
    candidates = default_candidates()
    offsets_ns = np.round(candidates * SECOND).astype(np.int64)
    event_ns = events["time_ns"].to_numpy()
    blocks = learner_blocks(events)
    learners = observations["log_id"].to_numpy()
    start = datetime_column_ns(observations["window_start"])
    end = datetime_column_ns(observations["window_end"])
    labels = pd.Categorical(observations["activity"]).codes.astype(np.int64)[:, None]
    seconds = (end - start) / 1e9

    began = time.perf_counter()
    totals = code_event_totals(event_ns, blocks, learners, start, end, offsets_ns, labels, [4])
    curve = likelihood_ratio_curve(totals, [np.bincount(labels[:, 0], weights=seconds, minlength=4)])
    coarse_s = time.perf_counter() - began

    began = time.perf_counter()
    model = scan_offset(observations, events, ["activity"])
    full_s = time.perf_counter() - began

    from sync.clock_gross import gross_totals
    began = time.perf_counter()
    gross_offsets, _, _ = gross_totals(event_ns, blocks, learners, start, end, labels, [4])
    gross_s = time.perf_counter() - began
    some = np.random.default_rng(0).choice(len(start), 200, replace=False)
    began = time.perf_counter()
    code_event_totals(event_ns, blocks, learners[some], start[some], end[some],
                      np.round(gross_offsets * SECOND).astype(np.int64), labels[some], [4])
    gross_pairs_s = (time.perf_counter() - began) * len(start) / len(some)

    sample = np.round(np.linspace(-300, 300, 24) * SECOND).astype(np.int64)
    groups = {learner: np.flatnonzero(learners == learner) for learner in np.unique(learners)}
    began = time.perf_counter()
    for offset in sample:
        per_offset_counts(event_ns, blocks, groups, start, end, offset)
    per_offset_s = (time.perf_counter() - began) / len(sample) * len(candidates)

    times_by_learner = {name: event_ns[a:b].tolist() for name, (a, b) in blocks.items()}
    began = time.perf_counter()
    for offset in (int(-100 * SECOND), int(100 * SECOND)):
        naive_counts(times_by_learner, learners, start.tolist(), end.tolist(), offset)
    naive_s = (time.perf_counter() - began) / 2 * len(candidates)

    at = truth.at_reference(model.reference_ns)
    print(f"\nautomatic scan, {len(observations)} observations x {len(events)} events x {len(candidates)} offsets")
    print(f"  ours, coarse scan       {coarse_s:8.2f} s   (peak at {candidates[np.argmax(curve)]:+.1f} s)")
    print(f"  ours, whole scan_offset {full_s:8.2f} s   offset {model.offset_s:+.2f} s (planted {at.offset_s:+.2f}), "
          f"drift {model.drift_ppm:+.1f} ppm (planted {PLANTED_DRIFT_PPM:+.1f}), confidence {model.confidence:.2f}")
    print(f"  per-offset loop         {per_offset_s:8.2f} s   (extrapolated from {len(sample)} offsets)  "
          f"ratio {per_offset_s / coarse_s:6.1f}x")
    print(f"  naive Python loop       {naive_s:8.2f} s   (extrapolated from 2 offsets)  ratio {naive_s / coarse_s:6.0f}x")
    print(f"  gross stage, ±14 h      {gross_s:8.2f} s   ({len(gross_offsets)} offsets by FFT); exact pair counting "
          f"{gross_pairs_s:8.1f} s (extrapolated from 200 windows)  ratio {gross_pairs_s / gross_s:6.1f}x")
    assert coarse_s <= 5.0
    assert abs(model.offset_s - at.offset_s) <= 1.0


READ_SCRIPT = """
import json, sys, time
sys.path.insert(0, {root!r})
began = time.perf_counter()
if {which!r} == "ours":
    from pathlib import Path
    from sync.log_spec import log_spec_from_toml
    from sync.logs import read_logs
    spec = log_spec_from_toml({{"path": {path!r}, "format": "parquet", "columns": {{"learner": "trainee",
        "time": "at", "action": "event", "outcome": "result", "item": "step"}}}}, Path("."), 1)
    events, report = read_logs([spec])
    rows = len(events)
else:
    import pandas as pd
    rows = len(pd.read_parquet({path!r}))
seconds = time.perf_counter() - began
# VmHWM: this process's own peak resident memory (ru_maxrss would carry the parent's over exec).
peak_kb = next(int(line.split()[1]) for line in open("/proc/self/status") if line.startswith("VmHWM:"))
print(json.dumps({{"rows": rows, "seconds": seconds, "peak_mb": peak_kb / 1024}}))
"""


def write_big_parquet(path: Path, rows: int = 10_000_000) -> None:
    """10M simulator events, five mapped columns and five it never needs."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(9)
    learners = pa.array([f"n-{i:05d}" for i in range(2000)])
    table = pa.table({
        "trainee": pa.DictionaryArray.from_arrays(pa.array(rng.integers(0, 2000, rows), pa.int32()), learners)
        .cast(pa.string()),
        "at": pa.array(pd.Timestamp("2026-03-02T07:00:00Z").value + np.sort(rng.integers(0, 30 * 86400 * SECOND, rows)),
                       pa.timestamp("ns", tz="UTC")),
        "event": pa.array(np.array(["attempt", "help_request", "reset"])[rng.integers(0, 3, rows)]),
        "result": pa.array(np.array(["pass", "fail", ""])[rng.integers(0, 3, rows)]),
        "step": pa.array(np.char.add("panel-1/step-", rng.integers(1, 40, rows).astype(str))),
        "session_token": pa.array(np.char.add("tok-", rng.integers(0, 10**9, rows).astype(str))),
        "screen_x": pa.array(rng.random(rows)),
        "screen_y": pa.array(rng.random(rows)),
        "client": pa.array(np.array(["desk-a", "desk-b", "desk-c", "desk-d"])[rng.integers(0, 4, rows)]),
        "latency_ms": pa.array(rng.integers(0, 500, rows)),
    })
    path.parent.mkdir(parents=True, exist_ok=True)
    pq.write_table(table, path, row_group_size=1_000_000)


def run_reader(which: str, path: Path) -> dict:
    script = READ_SCRIPT.format(root=str(ROOT), which=which, path=str(path))
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


@pytest.mark.timeout(1800)
def test_reading_ten_million_events_from_parquet():
    path = CACHE / "sync_events_10m.parquet"
    if not path.exists():
        write_big_parquet(path)
    ours = run_reader("ours", path)
    plain = run_reader("pandas", path)
    assert ours["rows"] == plain["rows"] == 10_000_000
    print(f"\nreading {ours['rows']} events from Parquet (5 of 10 columns mapped), fresh process each")
    print(f"  ours (read_logs)       {ours['seconds']:7.2f} s   peak {ours['peak_mb']:7.0f} MB")
    print(f"  pd.read_parquet (all)  {plain['seconds']:7.2f} s   peak {plain['peak_mb']:7.0f} MB")
    print(f"  ratio ours/plain       time {ours['seconds'] / plain['seconds']:.2f}x   "
          f"peak memory {ours['peak_mb'] / plain['peak_mb']:.2f}x")
    assert ours["peak_mb"] < plain["peak_mb"]
