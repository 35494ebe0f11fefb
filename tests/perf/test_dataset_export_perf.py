"""Benchmark: a platform's hive-partitioned Parquet log, a study of few observed learners.

    FIELDMARK_PERF=1 /work/venv/bin/python -m pytest tests/perf/test_dataset_export_perf.py -s

The dataset: FIELDMARK_DATASET_EVENTS events (default 100M) of 20,000 apprentices over
ten days, written as pyarrow.dataset writes it (``day=.../part-N.parquet``), each file
sorted by learner then time.  The study observed 500 of them, 50 windows of 20 s each.
Contenders, each in a fresh process (peak resident memory is its own), Arrow allocating from
jemalloc as the fieldmark command does (sync/arrow_memory.py):
  ours    sync.logs.read_logs with the observed learners' ids (filtered while reading)
          + every built-in window feature (export/features.py)
  duckdb  the filtered range join: read_parquet(hive) WHERE learner IN (observed), joined
          to the windows on learner and time, GROUP BY window: counts, attempts, errors,
          help requests, first and last time, distinct items and skills (so that it reads
          the six columns ours reads: item and skill feed distinct_items and the per-skill
          history features; without them DuckDB decodes two columns fewer than ours)
Targets (issue 16): ours <= 2 x duckdb's time, ours' peak <= 2 GB.  Generating 100M
events takes a while on a shared 2-core machine; the dataset is cached under
FIELDMARK_PERF_CACHE (default /tmp/fieldmark-perf).
"""
from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

CACHE = Path(os.environ.get("FIELDMARK_PERF_CACHE", "/tmp/fieldmark-perf"))
EVENTS = int(float(os.environ.get("FIELDMARK_DATASET_EVENTS", "100e6")))
LEARNERS, OBSERVED, WINDOWS_PER_LEARNER, DAYS = 20_000, 500, 50, 10
RUNS = 3
DATASET = CACHE / f"platform_{EVENTS}"
WINDOWS = CACHE / f"platform_{EVENTS}_windows.parquet"
SECOND = 1_000_000_000
DAY0 = 1_780_000_000 * SECOND
ACTIONS = ["connect_wire", "strip_insulation", "measure_voltage", "test_circuit", "hint", "label_terminal",
           "check_breaker", "open_manual", "reset_panel", "select_tool", "submit_step", "undo"]


def generate() -> None:
    """Day by day: every learner's events of the day, sorted by learner and time."""
    import pandas as pd
    import pyarrow as pa
    import pyarrow.parquet as pq

    if WINDOWS.exists():
        return
    rng = np.random.default_rng(160)
    names = pa.array([f"n-{number:05d}" for number in range(LEARNERS)])
    per_day = EVENTS // DAYS
    for day in range(DAYS):
        folder = DATASET / f"day=2026-06-{day + 1:02d}"
        folder.mkdir(parents=True, exist_ok=True)
        learner = np.sort(rng.integers(0, LEARNERS, per_day)).astype(np.int32)
        start = DAY0 + day * 86_400 * SECOND
        time_ns = start + rng.integers(0, 8 * 3600 * SECOND, per_day)
        order = np.lexsort((time_ns, learner))
        learner, time_ns = learner[order], time_ns[order]

        def dictionary(codes, values):
            return pa.DictionaryArray.from_arrays(pa.array(codes.astype(np.int32)), pa.array(values))

        table = pa.table({
            "learner": pa.DictionaryArray.from_arrays(pa.array(learner), names),
            "time": pa.array(time_ns, pa.timestamp("ns", tz="UTC")),
            "action": dictionary(rng.integers(0, len(ACTIONS), per_day), ACTIONS),
            "outcome": dictionary(rng.choice(3, per_day, p=[0.4, 0.2, 0.4]), ["correct", "incorrect", ""]),
            "item": dictionary(rng.integers(0, 300, per_day), [f"step-{n}" for n in range(300)]),
            "skill": dictionary(rng.integers(0, 25, per_day), [f"skill-{n}" for n in range(25)]),
        })
        pq.write_table(table, folder / "part-0.parquet", row_group_size=1_000_000)
        del table, learner, time_ns, order
    observed = np.sort(rng.choice(LEARNERS, OBSERVED, replace=False))
    log_id = np.repeat([f"n-{number:05d}" for number in observed], WINDOWS_PER_LEARNER)
    day = rng.integers(0, DAYS, len(log_id))
    start = DAY0 + day * 86_400 * SECOND + rng.integers(0, 8 * 3600 * SECOND, len(log_id))
    pd.DataFrame({"log_id": log_id, "start_ns": start, "end_ns": start + 20 * SECOND}).to_parquet(
        WINDOWS.with_suffix(".partial"))
    os.replace(WINDOWS.with_suffix(".partial"), WINDOWS)


def contender(name: str) -> dict:
    import pandas as pd

    from sync.arrow_memory import prefer_jemalloc

    prefer_jemalloc()  # Arrow allocates as the fieldmark command's does (sync/arrow_memory.py)

    windows = pd.read_parquet(WINDOWS)
    observed = sorted(set(windows["log_id"]))
    started = time.perf_counter()
    if name == "ours":
        from export.features import FeatureSettings, compute_features
        from sync.log_spec import log_spec_from_toml
        from sync.logs import read_logs

        spec = log_spec_from_toml({"path": str(DATASET), "format": "parquet", "columns": {
            "learner": "learner", "time": "time", "action": "action", "outcome": "outcome", "item": "item",
            "skill": "skill"}}, CACHE, 1)
        started = time.perf_counter()
        events, report = read_logs([spec], only_log_ids=observed)
        features = compute_features(events, windows, FeatureSettings(help_actions=("hint",)))
        extra = {"event_count_sum": int(features["event_count"].sum()), "rows_read": report.rows_read,
                 "rows_kept": report.rows, "features": int(features.shape[1]) - 2}
    elif name == "duckdb":
        import duckdb

        connection = duckdb.connect()
        connection.register("windows", windows.assign(window=np.arange(len(windows))))
        listed = ", ".join(f"'{learner}'" for learner in observed)
        result = connection.sql(f"""
            WITH e AS (SELECT learner, epoch_ns(time) AS time_ns, action, outcome, item, skill
                       FROM read_parquet('{DATASET}/**/*.parquet', hive_partitioning = true)
                       WHERE learner IN ({listed}))
            SELECT w."window", count(e.time_ns) AS events,
                   count(*) FILTER (WHERE e.outcome IN ('correct', 'incorrect')) AS attempts,
                   count(*) FILTER (WHERE e.outcome = 'incorrect') AS errors,
                   count(*) FILTER (WHERE e.action = 'hint') AS help_requests,
                   min(e.time_ns) AS first_time, max(e.time_ns) AS last_time,
                   count(DISTINCT e.item) FILTER (WHERE e.item <> '') AS distinct_items,
                   count(DISTINCT e.skill) AS skills
            FROM windows w LEFT JOIN e
              ON e.learner = w.log_id AND e.time_ns >= w.start_ns AND e.time_ns < w.end_ns
            GROUP BY w."window" """).df()
        extra = {"event_count_sum": int(result["events"].sum())}
    else:
        raise ValueError(name)
    seconds = time.perf_counter() - started
    return {"seconds": seconds, "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, **extra}


def run_contender(name: str) -> dict:
    root = Path(__file__).resolve().parents[2]
    output = subprocess.run([sys.executable, __file__, name], capture_output=True, text=True, check=True,
                            env=dict(os.environ, PYTHONPATH=str(root)), timeout=3600)
    return json.loads(output.stdout.strip().splitlines()[-1])


def test_observed_learners_export_beside_duckdb_filtered_range_join() -> None:
    generate()
    # Three runs each, alternating, each in a fresh process: the fastest of each (the run the
    # shared machine disturbed least) and the highest peak.
    runs = {"ours": [], "duckdb": []}
    for _ in range(RUNS):
        for name in runs:
            runs[name].append(run_contender(name))
    ours, reference = ({**min(results, key=lambda r: r["seconds"]),
                        "peak_mb": max(r["peak_mb"] for r in results)} for results in runs.values())
    times = {name: " ".join(f"{r['seconds']:.2f}" for r in results) for name, results in runs.items()}
    print(f"\n{EVENTS} events of {LEARNERS} learners in {DAYS} day partitions; {OBSERVED} observed, "
          f"{OBSERVED * WINDOWS_PER_LEARNER} windows (load average {os.getloadavg()[0]:.1f})")
    for label, result in (("fieldmark", ours), ("duckdb", reference)):
        print(f"  {label:<10} {result['seconds']:7.2f} s   peak {result['peak_mb']:7.0f} MB   "
              f"(runs: {times['ours' if label == 'fieldmark' else 'duckdb']} s)")
    print(f"  rows read {ours['rows_read']}, kept {ours['rows_kept']}; {ours['features']} feature columns")
    print(f"  time ratio {ours['seconds'] / reference['seconds']:.2f}   (target <= 2)")
    print(f"  peak       {ours['peak_mb']:.0f} MB   (target <= 2048)")
    assert ours["event_count_sum"] == reference["event_count_sum"]
    assert ours["seconds"] <= 2 * reference["seconds"]
    assert ours["peak_mb"] <= 2048


if __name__ == "__main__":
    print(json.dumps(contender(sys.argv[1])))
