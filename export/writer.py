"""Writing exported windows (Parquet or CSV) with a manifest beside them (reading: export/reader.py).

The manifest (``<name>.manifest.json`` next to the data file) records how the file was
made: fieldmark version, scheme hash, parameters, clock models, input file hashes, rows
per label, and which columns are features, labels and the group.  Parquet files carry
the same JSON in their schema metadata (key ``fieldmark``), so they are self-describing.

Both files are written to temporary names in the target folder and renamed only when
complete: a failed export leaves nothing half-written.  Two renames cannot be atomic
together, so the manifest beside the data file records the data file's SHA-256
(``data_sha256``) and every reader refuses a pair that does not match; temporary files
left by a killed export are removed by the next export to the same folder.
"""
from __future__ import annotations

import json
import os
from collections.abc import Iterable, Mapping
from pathlib import Path

import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
from tqdm import tqdm

from export.labelled_windows import LabelledWindows
from export.tables import GROUP, METADATA_KEY
from sync.file_digest import file_sha256  # re-exported: export.reader and imports call it from here

FORMATS: tuple[str, ...] = ("parquet", "csv")
DATA_DIGEST_KEY = "data_sha256"
TEMPORARY_SUFFIX = ".partial"
ROWS_PER_BATCH = 65_536


def manifest_path(path: Path) -> Path:
    """``windows.parquet`` -> ``windows.manifest.json`` in the same folder."""
    return Path(path).with_suffix(".manifest.json")


def file_digests(paths: Iterable[Path], names: Iterable[str], known: Mapping[str, str] | None = None) -> dict[str, str]:
    """name -> "sha256:<hex>" of each file's bytes; ``known`` (str(path) -> hex, e.g. from
    reading the logs) saves hashing a large file twice."""
    known = known or {}
    return {name: "sha256:" + (known.get(str(path)) or file_sha256(path))
            for path, name in zip(paths, names, strict=True)}


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
        "confidence_columns": result.confidence_columns,
        "label_confidence": result.label_confidence,
        "group_column": GROUP,
        "feature_definitions": result.feature_definitions,
        "column_descriptions": result.column_descriptions,
    }


def described_schema(schema: pa.Schema, descriptions: dict[str, str]) -> pa.Schema:
    """The schema with each field's description as field metadata (key ``description``)."""
    return pa.schema([field.with_metadata({**(field.metadata or {}), b"description": descriptions[field.name].encode()})
                      if descriptions.get(field.name) else field for field in schema], metadata=schema.metadata)


def write_windows(result: LabelledWindows, path: Path, manifest: dict, progress: bool = False) -> Path:
    """Write the table (format from ``manifest["format"]``) and its manifest; returns the manifest path."""
    path = Path(path)
    output_format = manifest["format"]
    if output_format not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS}, not {output_format!r}")
    text = json.dumps(manifest, indent=2, sort_keys=True, default=str)
    table = pa.Table.from_pandas(result.table, preserve_index=False)
    table = table.cast(described_schema(table.schema, manifest.get("column_descriptions", {})))
    table = table.replace_schema_metadata({**(table.schema.metadata or {}), METADATA_KEY: text.encode()})
    beside = manifest_path(path)
    remove_stale_temporaries(path.parent)
    data_temporary = path.with_name(f".{path.name}.{os.getpid()}{TEMPORARY_SUFFIX}")
    manifest_temporary = beside.with_name(f".{beside.name}.{os.getpid()}{TEMPORARY_SUFFIX}")
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
        beside_text = json.dumps({**manifest, DATA_DIGEST_KEY: file_sha256(data_temporary)}, indent=2,
                                 sort_keys=True, default=str)
        manifest_temporary.write_text(beside_text + "\n", encoding="utf-8")
        os.replace(data_temporary, path)
        os.replace(manifest_temporary, beside)
    finally:
        data_temporary.unlink(missing_ok=True)
        manifest_temporary.unlink(missing_ok=True)
    return beside


def remove_stale_temporaries(folder: Path) -> list[Path]:
    """Delete ``.<name>.<pid>.partial`` files in ``folder`` whose writing process is gone."""
    removed = []
    for candidate in Path(folder).glob(f".*{TEMPORARY_SUFFIX}"):
        pid_text = candidate.name[: -len(TEMPORARY_SUFFIX)].rpartition(".")[2]
        if pid_text.isdigit() and not _running(int(pid_text)):
            candidate.unlink(missing_ok=True)
            removed.append(candidate)
    return removed


def _running(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True
    return True
