"""Parquet logs -> EVENTS, reading only the mapped columns, text as dictionary-encoded.

Large logs (tens of millions of rows) stay small in memory because unmapped columns are
never read and text columns arrive as Arrow dictionaries (pandas categoricals).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from sync.csv_reader import events_from_columns
from sync.errors import InputError
from sync.local_time import LocalTimeCounts
from sync.log_spec import LogSpec

TEXT_ROLES: tuple[str, ...] = ("learner", "action", "outcome", "item", "skill")


def _is_text(arrow_type: pa.DataType) -> bool:
    return pa.types.is_string(arrow_type) or pa.types.is_large_string(arrow_type)


def read_parquet_log(spec: LogSpec, path: Path) -> tuple[pd.DataFrame, LocalTimeCounts, list[str]]:
    """One Parquet file -> (EVENTS rows, DST counts, warnings).  Raises InputError on bad input."""
    name = str(path)
    try:
        parquet = pq.ParquetFile(path)
    except (pa.ArrowInvalid, OSError) as error:
        raise InputError(name, None, f"is not a readable Parquet file ({error}); export it again") from None
    schema = parquet.schema_arrow
    missing = [f"{role} = {column!r}" for role, column in spec.columns.items() if column not in schema.names]
    if missing:
        raise InputError(name, "schema", f"has no column for {', '.join(missing)}; the file has "
                         f"{', '.join(schema.names)} -- fix [logs.columns] in study.toml")
    if parquet.metadata.num_rows == 0:
        raise InputError(name, None, "has no rows; export the log again or remove its [[logs]] entry")
    wanted = sorted(set(spec.columns.values()))
    nested = [column for column in wanted if pa.types.is_nested(schema.field(column).type)]
    if nested:
        raise InputError(name, f"column {nested[0]}", f"holds {schema.field(nested[0]).type} values, not single "
                         "values; export the log with one plain value per cell")
    text_columns = [spec.columns[role] for role in TEXT_ROLES
                    if role in spec.columns and _is_text(schema.field(spec.columns[role]).type)]
    table = pq.read_table(path, columns=wanted, read_dictionary=text_columns)
    frame = pd.DataFrame({column: table.column(column).to_pandas() for column in wanted})
    del table
    rows = np.arange(1, len(frame) + 1, dtype=np.int64)
    return events_from_columns(frame, spec, name, rows)
