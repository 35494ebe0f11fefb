"""Reading exported windows back: the manifest, the table, and (X, y, groups) for scikit-learn.

The counterpart of export/writer.py; ``load_windows`` is the data scientist's door.
"""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from export.tables import GROUP, METADATA_KEY
from export.writer import manifest_path
from sync.errors import InputError


def read_manifest(path: Path) -> dict:
    """The manifest of an exported windows file (schema metadata for Parquet, else the file beside)."""
    path = Path(path)
    if not path.is_file():
        raise InputError(path, None, "no such file; pass a windows file written by fieldmark export")
    if path.suffix.lower() == ".parquet":
        try:
            metadata = pq.read_schema(path).metadata or {}
        except pa.ArrowInvalid as error:
            raise InputError(path, None, f"not a Parquet file ({error})") from None
        if METADATA_KEY not in metadata:
            raise InputError(path, None, "not written by fieldmark export (no fieldmark metadata)")
        return json.loads(metadata[METADATA_KEY])
    beside = manifest_path(path)
    if not beside.is_file():
        raise InputError(beside, None, "manifest missing; it must lie beside the CSV written by fieldmark export")
    return json.loads(beside.read_text(encoding="utf-8"))


def read_windows(path: Path) -> tuple[pd.DataFrame, dict]:
    """(the exported table, its manifest)."""
    manifest = read_manifest(path)
    if manifest["format"] == "parquet":
        table = pd.read_parquet(path)
    else:
        text_columns = manifest["label_columns"] + [GROUP]
        # Only an empty field is missing: a code may well be called "NA" or "none".
        table = pd.read_csv(path, dtype={column: "string" for column in text_columns}, keep_default_na=False,
                            na_values=[""])
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
