"""Exported files: no raw identifiers, a manifest, atomic writes, ready for scikit-learn."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from sklearn.model_selection import GroupKFold, cross_val_score
from sklearn.tree import DecisionTreeClassifier

import export
from export import reader, writer
from export.pseudonyms import pseudonym
from sync.errors import InputError

from export_study_data import KEY, export_file, study_inputs

_, _, ROSTER = study_inputs()
RAW_IDENTIFIERS = list(ROSTER["learner"]) + list(ROSTER["log_id"]) + list(ROSTER["label"])


@pytest.fixture
def exported(tmp_path):
    return export_file(tmp_path)


def every_byte(path) -> bytes:
    return path.read_bytes() + writer.manifest_path(path).read_bytes()


@pytest.mark.parametrize("output_format", ["parquet", "csv"])
def test_no_raw_learner_id_or_roster_label_anywhere_in_the_output(tmp_path, output_format) -> None:
    path, _ = export_file(tmp_path, output_format)
    data = every_byte(path)
    table, _ = reader.read_windows(path)
    cells = {str(cell) for cell in table.to_numpy().ravel()}
    for identifier in RAW_IDENTIFIERS:
        assert identifier.encode() not in data, identifier
        assert not any(identifier in cell for cell in cells), identifier
    assert "looked away" not in data.decode("latin-1")                              # notes never leave
    assert set(table["learner"]) == {pseudonym(learner, KEY) for learner in ROSTER["learner"]}
    assert (table["group"] == table["learner"]).all()


@pytest.mark.parametrize("output_format", ["parquet", "csv"])
def test_keep_ids_is_an_explicit_opt_in_that_exports_them(tmp_path, output_format) -> None:
    path, _ = export_file(tmp_path, output_format, keep_ids=True)
    data = every_byte(path)
    assert b"L01" in data and b"n-0001" in data                                     # the positive control of the test above
    assert b"Bench 1" not in data                                                   # roster labels never, even then


def test_roster_attributes_labels_and_sources_are_exported(tmp_path) -> None:
    path, result = export_file(tmp_path, attributes=("site", "cohort"))  # attributes leave only when listed
    table, manifest = reader.read_windows(path)
    assert {"site", "cohort", "activity", "affect", "label_source_activity", "label_source_affect"} <= set(table.columns)
    assert manifest["attribute_columns"] == ["site", "cohort"]
    assert table["window_id"].is_unique and 200 < len(table) <= 10 * 24              # one row per unit, never per coder
    assert manifest["rows_per_label"]["activity"] == {code: int(n) for code, n in table["activity"].value_counts().sort_index().items()}
    assert "not_visible" not in set(table["activity"].dropna())


def test_manifest_records_how_the_file_was_made(exported) -> None:
    path, result = exported
    manifest = json.loads(writer.manifest_path(path).read_text())
    assert manifest["fieldmark_version"] == "0.1.0" and manifest["scheme_hash"] == "scheme-1"
    assert manifest["parameters"]["policy"] == "first-coder"
    assert manifest["parameters"]["features"]["rapid_seconds"] == 2.0
    assert manifest["clock_models"][0]["offset_s"] == 12.5
    assert manifest["inputs"] == {"logs/centre_north.csv": "sha256:00"}
    assert manifest["feature_columns"] == result.feature_columns
    assert set(manifest["feature_definitions"]) == set(result.feature_columns)     # keyed by output column
    assert manifest["feature_definitions"]["event_count"] == "events in the window"
    assert all(manifest["feature_definitions"][column] for column in result.feature_columns)
    assert set(manifest["column_descriptions"]) == set(result.table.columns)
    embedded = json.loads(pq.read_schema(path).metadata[b"fieldmark"])
    # The manifest beside the data also records the data file's SHA-256 (a file cannot hold its own hash).
    assert manifest.pop(writer.DATA_DIGEST_KEY) == writer.file_sha256(path)
    assert embedded == manifest


def test_parquet_fields_carry_their_descriptions(exported) -> None:
    """Another tool reading the schema alone sees what each column means (field metadata)."""
    path, result = exported
    schema = pq.read_schema(path)
    described = {field.name: field.metadata[b"description"].decode() for field in schema if field.metadata}
    assert set(described) == set(result.table.columns)
    assert "pseudonym" in described["learner"] and "cross-validation" in described["group"]
    action_columns = [column for column in result.feature_columns if column.startswith("action_")]
    assert action_columns and all(column[len("action_"):] in described[column] for column in action_columns)


def test_file_digests_are_sha256_of_the_bytes(tmp_path) -> None:
    import hashlib
    log = tmp_path / "log.csv"
    log.write_bytes(b"trainee,timestamp\n" * 100_000)
    expected = hashlib.sha256(log.read_bytes()).hexdigest()
    assert writer.file_digests([log], ["logs/log.csv"]) == {"logs/log.csv": "sha256:" + expected}


def test_a_failed_write_leaves_nothing_behind(tmp_path, monkeypatch) -> None:
    monkeypatch.setattr(writer, "ROWS_PER_BATCH", 10)
    calls = {"batches": 0}
    original = pq.ParquetWriter.write_batch

    def fail_on_third_batch(self, batch, *args, **kwargs):
        calls["batches"] += 1
        if calls["batches"] == 3:
            raise OSError("disk full")
        return original(self, batch, *args, **kwargs)

    monkeypatch.setattr(pq.ParquetWriter, "write_batch", fail_on_third_batch)
    with pytest.raises(OSError, match="disk full"):
        export_file(tmp_path)
    assert list(tmp_path.iterdir()) == []


def test_a_failed_write_keeps_the_previous_export_intact(tmp_path, monkeypatch) -> None:
    path, _ = export_file(tmp_path)
    before = every_byte(path)
    monkeypatch.setattr(pq.ParquetWriter, "write_batch", lambda *args, **kwargs: (_ for _ in ()).throw(OSError("disk full")))
    with pytest.raises(OSError):
        export_file(tmp_path, policy="majority")
    assert every_byte(path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["windows.manifest.json", "windows.parquet"]


@pytest.mark.parametrize("output_format", ["parquet", "csv"])
def test_load_windows_is_ready_for_grouped_cross_validation(tmp_path, output_format) -> None:
    path, result = export_file(tmp_path, output_format)
    features, labels, groups = export.load_windows(path, "activity")
    assert list(features.columns) == result.feature_columns
    assert all(dtype == np.float64 for dtype in features.dtypes)
    assert labels.notna().all() and len(labels) == len(features) == len(groups)
    folds = list(GroupKFold(n_splits=5).split(features, labels, groups))
    for train, test in folds:
        assert not set(groups.iloc[train]) & set(groups.iloc[test])
    scores = cross_val_score(DecisionTreeClassifier(random_state=0), features.fillna(0), labels, groups=groups, cv=GroupKFold(5))
    assert len(scores) == 5
    table = result.table
    pd.testing.assert_series_equal(labels, table.loc[table["activity"].notna(), "activity"].reset_index(drop=True).astype(str), check_names=False)


def test_csv_and_parquet_carry_the_same_table(tmp_path) -> None:
    parquet_path, _ = export_file(tmp_path, "parquet")
    csv_path, _ = export_file(tmp_path, "csv")
    for dimension in ("activity", "affect"):
        left = export.load_windows(parquet_path, dimension)
        right = export.load_windows(csv_path, dimension)
        for a, b in zip(left, right):
            pd.testing.assert_frame_equal(pd.DataFrame(a), pd.DataFrame(b), check_dtype=False)


def test_loading_something_else_is_a_user_error(tmp_path) -> None:
    with pytest.raises(InputError, match="no such file"):
        export.load_windows(tmp_path / "missing.parquet")
    pd.DataFrame({"x": [1]}).to_parquet(tmp_path / "plain.parquet")
    with pytest.raises(InputError, match="not written by fieldmark export"):
        export.load_windows(tmp_path / "plain.parquet")
    path, _ = export_file(tmp_path)
    with pytest.raises(InputError, match="no such dimension"):
        export.load_windows(path, "mood")
