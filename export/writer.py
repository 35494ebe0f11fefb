"""Writing exported windows (Parquet or CSV) with a manifest beside them, and reading them back.

The manifest (``<name>.manifest.json`` next to the data file) records how the file was
made: fieldmark version, scheme hash, parameters, clock models, input file hashes, rows
per label, and which columns are features, labels and the group.  Parquet files carry
the same JSON in their schema metadata (key ``fieldmark``), so they are self-describing.

Both files are written to temporary names in the target folder and renamed only when
complete: a failed export leaves nothing half-written.
"""
from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Iterable
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
from tqdm import tqdm

from export.labelled_windows import LabelledWindows
from export.tables import GROUP, METADATA_KEY
from sync.errors import InputError

FORMATS: tuple[str, ...] = ("parquet", "csv")
ROWS_PER_BATCH = 65_536


def manifest_path(path: Path) -> Path:
    """``windows.parquet`` -> ``windows.manifest.json`` in the same folder."""
    return Path(path).with_suffix(".manifest.json")


def file_sha256(path: Path) -> str:
    """Hex SHA-256 of a file's bytes, read in 1 MiB blocks (logs can be large)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def file_digests(paths: Iterable[Path], names: Iterable[str]) -> dict[str, str]:
    """name -> "sha256:<hex>" of each file's bytes."""
    return {name: "sha256:" + file_sha256(path) for path, name in zip(paths, names, strict=True)}


def build_manifest(
    result: LabelledWindows,
    *,
    version: str,
    scheme_hash: str,
    parameters: dict,
    clock_models: list[dict],
    inputs: dict[str, str],
    output_format: str,
) -> dict:
    """The manifest's content (JSON-ready)."""
    return {
        "fieldmark_version": version,
        "format": output_format,
        "rows": int(len(result.table)),
        "scheme_hash": scheme_hash,
        "parameters": parameters,
        "clock_models": clock_models,
        "inputs": inputs,
        "rows_per_label": result.rows_per_label(),
        "label_columns": result.label_columns,
        "feature_columns": result.feature_columns,
        "attribute_columns": result.attribute_columns,
        "group_column": GROUP,
        "feature_definitions": result.feature_definitions,
    }


def write_windows(result: LabelledWindows, path: Path, manifest: dict, progress: bool = False) -> Path:
    """Write the table (format from ``manifest["format"]``) and its manifest; returns the manifest path."""
    path = Path(path)
    output_format = manifest["format"]
    if output_format not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS}, not {output_format!r}")
    text = json.dumps(manifest, indent=2, sort_keys=True, default=str)
    table = pa.Table.from_pandas(result.table, preserve_index=False)
    table = table.replace_schema_metadata({**(table.schema.metadata or {}), METADATA_KEY: text.encode()})
    beside = manifest_path(path)
    data_temporary = path.with_name(f".{path.name}.{os.getpid()}.partial")
    manifest_temporary = beside.with_name(f".{beside.name}.{os.getpid()}.partial")
    try:
        batches = table.to_batches(max_chunksize=ROWS_PER_BATCH)
        with tqdm(total=table.num_rows, unit="rows", desc="writing", disable=not progress) as bar:
            if output_format == "parquet":
                with pq.ParquetWriter(data_temporary, table.schema) as writer:
                    for batch in batches:
                        writer.write_batch(batch)
                        bar.update(batch.num_rows)
            else:
                with pacsv.CSVWriter(data_temporary, table.schema) as writer:
                    for batch in batches:
                        writer.write_batch(batch)
                        bar.update(batch.num_rows)
        manifest_temporary.write_text(text + "\n", encoding="utf-8")
        os.replace(data_temporary, path)
        os.replace(manifest_temporary, beside)
    finally:
        data_temporary.unlink(missing_ok=True)
        manifest_temporary.unlink(missing_ok=True)
    return beside


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
