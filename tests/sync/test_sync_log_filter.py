"""Reading only the observed learners: every reader filters while reading, a hive-partitioned
Parquet dataset is read as one log, and the window features are bit-identical with and
without the filter (history features read the learner's whole log, which is kept)."""
from __future__ import annotations

import json

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pytest

from export.features import FEATURES, compute_features
from sync.errors import InputError
from sync.log_spec import log_spec_from_toml
from sync.logs import read_logs

SECOND = 1_000_000_000
COLUMNS = {"learner": "trainee", "time": "at", "action": "event", "outcome": "result", "skill": "skill",
           "item": "step", "duration": "seconds"}
OBSERVED = ["n-0003", "n-0011", "n-0017"]


def simulator_log(events: int = 4000, learners: int = 20, seed: int = 5) -> pd.DataFrame:
    """Apprentices on the panel simulator at two centres (generated)."""
    rng = np.random.default_rng(seed)
    learner = rng.integers(0, learners, events)
    return pd.DataFrame({
        "site": np.where(learner % 2 == 0, "north", "south"),
        "trainee": [f"n-{number:04d}" for number in learner],
        "at": pd.to_datetime(1_780_000_000 * SECOND + np.sort(rng.integers(0, 3600 * SECOND, events)), utc=True),
        "event": rng.choice(["connect_wire", "measure_voltage", "hint", "test_circuit"], events),
        "result": rng.choice(["correct", "incorrect", ""], events),
        "skill": rng.choice(["grounding", "breakers", "labelling"], events),
        "step": rng.choice([f"step-{n}" for n in range(12)], events),
        "seconds": rng.exponential(4.0, events).round(2),
    })


def spec(folder, path, log_format, **extra):
    return log_spec_from_toml({"path": path, "format": log_format, "columns": COLUMNS, **extra}, folder, 1)


def windows_of(events: pd.DataFrame, learners: list[str], count: int = 60, seed: int = 9) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    low, high = int(events["time_ns"].min()), int(events["time_ns"].max())
    start = rng.integers(low, high, count)
    return pd.DataFrame({"log_id": rng.choice(learners, count), "start_ns": start, "end_ns": start + 90 * SECOND})


def test_hive_dataset_filtered_while_reading_matches_duckdb_and_reading_everything(tmp_path):
    log = simulator_log()
    # Written the way pyarrow.dataset (and most engines) write a hive-partitioned dataset;
    # small row groups, sorted by learner, so that row-group statistics can skip some.
    ds.write_dataset(pa.Table.from_pandas(log.sort_values(["trainee", "at"]), preserve_index=False),
                     tmp_path / "events", format="parquet", partitioning=["site"], partitioning_flavor="hive",
                     max_rows_per_group=200, min_rows_per_group=200, max_rows_per_file=100_000)
    everything, full_report = read_logs([spec(tmp_path, "events", "parquet")])
    kept, report = read_logs([spec(tmp_path, "events", "parquet")], only_log_ids=OBSERVED)
    assert full_report.rows == len(log)
    reference = everything[everything["learner"].isin(OBSERVED)].reset_index(drop=True)
    pd.testing.assert_frame_equal(kept.astype({c: str for c in ("learner", "action", "outcome", "item", "skill", "source")}),
                                  reference.astype({c: str for c in ("learner", "action", "outcome", "item", "skill",
                                                                     "source")}))
    assert report.rows == len(kept) < report.rows_read < len(log)  # row groups without them were not read
    # Outside reference: DuckDB reading the same dataset with the same filter.
    counted = duckdb.sql(f"""SELECT trainee, count(*) AS n FROM read_parquet('{tmp_path}/events/**/*.parquet',
                             hive_partitioning = true) WHERE trainee IN {tuple(OBSERVED)} GROUP BY trainee""").df()
    assert dict(zip(counted["trainee"], counted["n"])) == kept["learner"].astype(str).value_counts().to_dict()


def test_learner_partitions_not_wanted_are_not_opened(tmp_path):
    log = simulator_log()
    ds.write_dataset(pa.Table.from_pandas(log, preserve_index=False), tmp_path / "by_learner", format="parquet",
                     partitioning=["trainee"], partitioning_flavor="hive")
    kept, report = read_logs([spec(tmp_path, "by_learner", "parquet")], only_log_ids=OBSERVED)
    assert sorted(set(kept["learner"].astype(str))) == OBSERVED
    assert report.rows_read == report.rows == int(log["trainee"].isin(OBSERVED).sum())


@pytest.mark.parametrize("log_format", ["csv", "parquet"])
def test_features_are_bit_identical_with_and_without_the_filter(tmp_path, log_format):
    log = simulator_log().drop(columns="site")
    if log_format == "csv":
        log.to_csv(tmp_path / "log.csv", index=False)
        entry = spec(tmp_path, "log.csv", "csv")
    else:
        log.to_parquet(tmp_path / "log.parquet", row_group_size=500)
        entry = spec(tmp_path, "log.parquet", "parquet")
    everything, _ = read_logs([entry])
    kept, report = read_logs([entry], only_log_ids=OBSERVED)
    assert report.rows_read == len(log) and report.rows == int(log["trainee"].isin(OBSERVED).sum())
    windows = windows_of(everything, OBSERVED)
    full = compute_features(everything, windows, features=FEATURES)
    filtered = compute_features(kept, windows, features=FEATURES)
    assert list(full.columns) == list(filtered.columns)
    for column in full.columns:  # bit for bit, NaN where NaN
        assert np.array_equal(full[column].to_numpy(), filtered[column].to_numpy(), equal_nan=True), column
    assert full["history_attempts"].sum() > 0  # the history features were exercised


@pytest.mark.parametrize("method", ["marks", "auto"])
def test_align_reads_only_the_observed_learners_and_stores_the_same_models(tmp_path, method):
    from observer_app.pipeline.alignment import fit_clock_models, read_study_logs, stored_clock_models
    from observer_app.study.folder import load_study
    from tests.conftest import call_cli
    from tests.sync.sync_clock_study import build_study

    folder = build_study(tmp_path / "study", learners=4, hours_per_day=0.5)
    # Others on the platform: learners outside the roster and a roster learner never observed.
    log_path = folder / "logs" / "centre_north.csv"
    log = pd.read_csv(log_path)
    others = pd.concat([log.assign(trainee=f"n-09{number:02d}") for number in range(3)], ignore_index=True)
    pd.concat([log, others], ignore_index=True).to_csv(log_path, index=False)
    roster = pd.read_csv(folder / "roster.csv")
    pd.concat([roster, pd.DataFrame({"learner": ["L99"], "label": ["Bench 99"], "log_id": ["n-0900"]})]
              ).to_csv(folder / "roster.csv", index=False)
    study = load_study(folder)
    everyone = fit_clock_models(study, method, logs=read_study_logs(study))  # no filter: every learner read

    result = call_cli("align", folder, "--method", method, "--accept-uncertain", "--json")
    assert result.returncode == 0, result.stderr
    payload = json.loads(result.stdout)
    assert payload["logs"]["rows_read"] == len(log) + len(others)
    assert payload["logs"]["rows"] == len(log)  # the observed learners' rows only
    stored = stored_clock_models(study)
    assert set(stored) == set(everyone.models) and stored
    for key, model in everyone.models.items():  # identical models, bit for bit in their JSON
        assert stored[key].to_json() == model.to_json(), key
    text = call_cli("align", folder, "--method", method, "--accept-uncertain")
    assert f"read {len(log) + len(others)} log rows" in text.stdout and f"kept {len(log)} events" in text.stdout


def test_dictionary_learners_with_nulls_and_unused_words_are_filtered_like_pandas(tmp_path):
    """The filtered Parquet read decides on dictionaries (indices taken zero-copy when none is
    null, a mark per used word): checked against plain pandas on the same file, with null
    learners, learner ids padded with spaces (" n-007 " is learner n-007, as in a CSV: its events
    had kept the spaces and missed the learner's windows), and words no kept row uses."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    from sync.log_spec import log_spec_from_toml
    from sync.parquet_reader import read_parquet_log

    rng = np.random.default_rng(5)
    ids = np.array([f"n-{n:03d}" for n in range(40)] + [" n-007 "], dtype=object)
    codes = rng.integers(0, len(ids), 3000)
    learner = pa.DictionaryArray.from_arrays(pa.array(codes.astype(np.int32), mask=rng.random(3000) < 0.05),
                                             pa.array(ids.tolist()))
    action = pa.DictionaryArray.from_arrays(pa.array(rng.integers(0, 6, 3000).astype(np.int32)),
                                            pa.array([f"a{k}" for k in range(6)]))
    time = pa.array(1_780_000_000_000_000_000 + np.sort(rng.integers(0, 10**12, 3000)), pa.timestamp("ns", tz="UTC"))
    path = tmp_path / "log.parquet"
    pq.write_table(pa.table({"learner": learner, "time": time, "action": action}), path, row_group_size=700)
    spec = log_spec_from_toml({"path": str(path), "format": "parquet",
                               "columns": {"learner": "learner", "time": "time", "action": "action"}}, tmp_path, 1)
    wanted = frozenset({"n-007", "n-011", "n-030"})
    events, _, _, rows_read = read_parquet_log(spec, path, wanted)
    plain = pq.read_table(path).to_pandas()
    plain["learner"] = plain["learner"].astype("string").str.strip()
    expected = plain[plain["learner"].isin(wanted)]
    assert rows_read == 3000
    assert len(events) == len(expected) > 0
    assert sorted(events["learner"].astype(str)) == sorted(expected["learner"].astype(str))
    assert set(events["learner"].cat.categories.astype(str)) - {""} <= wanted  # unused words dropped, " n-007 " merged
    assert sorted(events["action"].astype(str)) == sorted(expected["action"].astype(str))


@pytest.mark.parametrize("log_format", ["parquet", "csv"])
def test_an_empty_part_of_a_folder_entry_is_skipped_with_a_warning(tmp_path, log_format):
    """Engines write empty parts into a dataset (common practice: a partition with no rows
    left after a filter); one such file must not refuse the whole log, and must be said."""
    log = simulator_log()
    folder = tmp_path / "events"
    for number, part in enumerate((log.iloc[:2000], log.iloc[2000:], log.iloc[:0])):
        target = folder / f"part-{number}.{log_format}"
        folder.mkdir(exist_ok=True)
        if log_format == "parquet":
            part.to_parquet(target, index=False)
        else:
            part.to_csv(target, index=False)
    extra = {"timezone": "UTC"}
    events, report = read_logs([spec(tmp_path, "events", log_format, **extra)], only_log_ids=OBSERVED)
    reference, _ = read_logs([spec(tmp_path, f"events/part-{number}.{log_format}", log_format, **extra)
                              for number in (0, 1)], only_log_ids=OBSERVED)
    assert events[["learner", "time_ns", "action"]].astype(str).equals(reference[["learner", "time_ns", "action"]].astype(str))
    assert len(events) == int(log["trainee"].isin(OBSERVED).sum())  # every kept row, counted by pandas
    empty = str(folder / f"part-2.{log_format}")
    assert [warning for warning in report.warnings if empty in warning and "skipped" in warning]
    with pytest.raises(InputError, match="no rows; export the log again"):  # named alone, it is refused
        read_logs([spec(tmp_path, f"events/part-2.{log_format}", log_format, **extra)])
