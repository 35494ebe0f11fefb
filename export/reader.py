"""Reading exported windows back: the manifest, the table, and (X, y, groups) for scikit-learn.

The counterpart of export/writer.py; ``load_windows`` is the data scientist's door.
"""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pyarrow as pa
import numpy as np
import pyarrow.parquet as pq

from export.tables import METADATA_KEY
from export.writer import DATA_DIGEST_KEY, FORMATS, file_sha256, manifest_path
from sync.csv_header import check_header
from sync.errors import InputError


def read_manifest(path: Path) -> dict:
    """The manifest of an exported windows file (schema metadata for Parquet, else the file beside).

    Checked before use: its keys and their types, and the data file's SHA-256 when the
    manifest beside the file records one (a data file renamed into place without its new
    manifest -- an export killed between the two renames -- is refused, never paired
    with the old manifest).
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(path, None, "no such file; pass a windows file written by fieldmark export")
    beside = manifest_path(path)
    if path.suffix.lower() == ".parquet":
        try:
            metadata = pq.read_schema(path).metadata or {}
        except (pa.ArrowInvalid, OSError) as error:
            raise InputError(path, None, f"not a Parquet file ({error})") from None
        if METADATA_KEY not in metadata:
            raise InputError(path, None, "not written by fieldmark export (no fieldmark metadata)")
        manifest = check_manifest(_json(metadata[METADATA_KEY], path), path)
    else:
        if not beside.is_file():
            raise InputError(beside, None, "manifest missing; it must lie beside the CSV written by fieldmark export")
        manifest = check_manifest(_json(beside.read_bytes(), beside), beside)
    if beside.is_file():
        described = manifest if path.suffix.lower() != ".parquet" else check_manifest(_json(beside.read_bytes(), beside),
                                                                                     beside)
        if described["format"] == manifest["format"]:  # windows.csv and windows.parquet share one manifest name
            _check_data_digest(path, beside, described)
    return manifest


def _json(raw: bytes, path: Path) -> object:
    try:
        return json.loads(raw.decode("utf-8-sig"))
    except UnicodeDecodeError:
        raise InputError(path, None, "manifest is not UTF-8 text; export the windows again") from None
    except RecursionError:
        raise InputError(path, None, "manifest is nested too deeply; export the windows again") from None
    except ValueError as error:
        raise InputError(path, None, f"manifest is not valid JSON ({str(error).split(':')[0]}); "
                         "export the windows again") from None


def check_manifest(manifest: object, path: Path) -> dict:
    """The manifest's keys that readers rely on, with their JSON types; InputError naming the first wrong one."""
    if not isinstance(manifest, dict):
        raise InputError(path, None, "manifest is not a JSON object; export the windows again")
    expected = {"format": str, "label_columns": list, "feature_columns": list, "group_column": str}
    for key, kind in expected.items():
        if not isinstance(manifest.get(key), kind):
            raise InputError(path, key, f"missing or not a JSON {kind.__name__.replace('str', 'text')}; "
                             "export the windows again")
    for key in ("label_columns", "feature_columns"):
        if not all(isinstance(name, str) for name in manifest[key]):
            raise InputError(path, key, "must list column names as text; export the windows again")
    for key in ("label_columns", "feature_columns"):
        if not manifest[key]:
            raise InputError(path, key, "lists no column; export the windows again")
    if manifest["format"] not in FORMATS:
        raise InputError(path, "format", f"{manifest['format']!r} is not one of {', '.join(FORMATS)}")
    digest = manifest.get(DATA_DIGEST_KEY)
    if digest is not None and not isinstance(digest, str):
        raise InputError(path, DATA_DIGEST_KEY, "must be text; export the windows again")
    return manifest


def _check_data_digest(path: Path, beside: Path, manifest: dict) -> None:
    recorded = manifest.get(DATA_DIGEST_KEY)
    if recorded is None:
        return
    if recorded != file_sha256(path):
        raise InputError(beside, DATA_DIGEST_KEY, f"does not match {path.name}: the data file and its manifest are "
                         "from different exports (one was interrupted or replaced); export the windows again")


def read_windows(path: Path) -> tuple[pd.DataFrame, dict]:
    """(the exported table, its manifest); InputError when the table does not hold what the manifest lists."""
    path = Path(path)
    manifest = read_manifest(path)
    try:
        if manifest["format"] == "parquet":
            table = pd.read_parquet(path)
        else:
            check_header(path)
            text_columns = manifest["label_columns"] + [manifest["group_column"]]
            # Only an empty field is missing: a code may well be called "NA" or "none".
            table = pd.read_csv(path, dtype={column: "string" for column in text_columns}, keep_default_na=False,
                                na_values=[""], encoding="utf-8-sig")
    except (UnicodeDecodeError, pd.errors.ParserError, pd.errors.EmptyDataError, pa.ArrowException, OSError) as error:
        raise InputError(path, None, f"cannot be read as {manifest['format']} "
                         f"({str(error).splitlines()[0][:120]}); export the windows again") from None
    wanted = manifest["label_columns"] + manifest["feature_columns"] + [manifest["group_column"]]
    missing = [column for column in wanted if column not in table.columns]
    if missing:
        raise InputError(path, f"column {missing[0]}", "listed in the manifest but not in the file; "
                         "export the windows again")
    if table.empty:
        raise InputError(path, None, "holds no windows; export again once observations are coded")
    for column in manifest["feature_columns"]:
        values = pd.to_numeric(table[column], errors="coerce")
        bad = (values.isna() & table[column].notna()) | np.isinf(values.to_numpy(dtype="float64", na_value=np.nan))
        if bad.any():
            row = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(path, f"column {column}, row {row + 2}", f"{table[column].iloc[row]!r} is not a finite "
                             "number; a feature must be a number or empty")
        table[column] = values.astype("float64")
    return table, manifest


def load_windows(path: Path, dimension: str | None = None) -> tuple[pd.DataFrame, pd.Series, pd.Series]:
    """(X, y, groups) for scikit-learn: feature columns, one dimension's labels, learner groups.

    ``dimension`` defaults to the first label column.  Rows without a label for it are left out.
    """
    table, manifest = read_windows(path)
    return windows_xy(table, manifest, path, dimension)


def windows_xy(table: pd.DataFrame, manifest: dict, path: Path,
               dimension: str | None = None) -> tuple[pd.DataFrame, pd.Series, pd.Series]:
    """``load_windows`` on a table already read, so several dimensions share one read."""
    labels = manifest["label_columns"]
    dimension = labels[0] if dimension is None else dimension
    if dimension not in labels:
        raise InputError(path, dimension, f"no such dimension; the file has {', '.join(labels)}")
    labelled = table[table[dimension].notna()].reset_index(drop=True)
    features = labelled[manifest["feature_columns"]].astype("float64")
    return features, labelled[dimension].astype(str), labelled[manifest["group_column"]].astype(str)
