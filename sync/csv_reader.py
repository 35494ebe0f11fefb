"""CSV logs -> EVENTS: only the mapped columns, read as text by Arrow, delimiter detected unless given."""
from __future__ import annotations

import codecs
import csv
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from sync.errors import InputError
from sync.event_table import build_events
from sync.local_time import LocalTimeCounts
from sync.log_spec import LogSpec
from sync.plausible_values import check_durations
from sync.time_column import parse_time_column

DELIMITER_CANDIDATES = ",;\t|"
SNIFF_BYTES = 64 * 1024
BLOCK_BYTES = 16 * 1024 * 1024
DECIMAL_COMMA = re.compile(r"[+-]?\d+,\d+")  # "1,5": a spreadsheet set to a decimal comma
TEXT_ROLES: tuple[str, ...] = ("learner", "action", "outcome", "item", "skill")


def detect_delimiter(sample: str) -> str:
    """The delimiter of a CSV sample: the csv module's sniffer over , ; tab |, else comma."""
    try:
        return csv.Sniffer().sniff(sample, delimiters=DELIMITER_CANDIDATES).delimiter
    except csv.Error:
        return ","


def _encoding(spec: LogSpec) -> str:
    # A UTF-8 byte order mark (spreadsheet exports) is not part of the first column's name.
    return "utf-8-sig" if spec.encoding.lower().replace("_", "-") in ("utf-8", "utf8") else spec.encoding


def read_csv_log(spec: LogSpec, path: Path,
                 only: frozenset[str] | None = None) -> tuple[pd.DataFrame, LocalTimeCounts, list[str], int]:
    """One CSV file -> (EVENTS rows, DST counts, warnings, rows read).  Raises InputError on bad input.

    Arrow's CSV reader, in blocks: only the mapped columns, text dictionary-encoded;
    ``only`` keeps just those learners' rows block by block.  Times are parsed by
    sync/time_column.py (the DST rule of sync/local_time.py, not Arrow's).
    """
    name = str(path)
    encoding = _encoding(spec)
    try:
        with open(path, encoding=encoding, newline="") as handle:
            sample = handle.read(SNIFF_BYTES)
    except UnicodeDecodeError as error:
        raise InputError(name, f"byte {error.start}", f"is not valid {spec.encoding} text; "
                         "set encoding = \"...\" (e.g. \"cp1252\") in its [[logs]] entry") from None
    if not sample.strip():
        raise InputError(name, None, "is empty; export the log again or remove its [[logs]] entry")
    delimiter = spec.delimiter or detect_delimiter(sample)
    try:
        header = next(csv.reader([sample.splitlines()[0]], delimiter=delimiter))
    except StopIteration:
        header = []
    header = [column.strip() for column in header]
    missing = [f"{role} = {column!r}" for role, column in spec.columns.items() if column not in header]
    if missing:
        raise InputError(name, "header", f"has no column for {', '.join(missing)}; the file has "
                         f"{', '.join(header) or 'no columns'} -- fix [logs.columns] in study.toml")
    repeated = sorted({column for column in spec.columns.values() if header.count(column) > 1})
    if repeated:
        raise InputError(name, "header", f"column {repeated[0]!r} appears more than once; rename the other "
                         "so it is clear which one to read")
    table, rows, rows_read = _read_arrow(spec, path, header, delimiter, only)
    if rows_read == 0:
        return empty_file(spec, name, "has a header but no rows")
    frame = pd.DataFrame({column: table.column(column).to_pandas() for column in table.column_names})
    del table
    events, counts, warnings, _ = events_from_columns(frame, spec, name, rows)
    return events, counts, warnings, rows_read


def _read_arrow(spec: LogSpec, path: Path, header: list[str], delimiter: str,
                only: frozenset[str] | None) -> tuple[pa.Table, np.ndarray, int]:
    """(the mapped columns, their 1-based data row numbers, rows read) by Arrow, block by block.

    A parse error is retried once allowing line breaks inside quoted values (slower, so
    not the default); then it names the row.
    """
    wanted = sorted(set(spec.columns.values()))
    text_roles = [spec.columns[role] for role in TEXT_ROLES if role in spec.columns]
    types = {column: pa.dictionary(pa.int32(), pa.string()) if column in text_roles else pa.string()
             for column in wanted}
    learner = spec.columns["learner"]
    wanted_ids = None if only is None else pa.array(sorted(only), pa.string())
    # Naive ISO 8601 stamps are parsed by Arrow (in C++, on every core) as wall-clock
    # readings; sync/time_column.py then applies our DST rule.  Any other stamp (an
    # offset, epoch numbers, a bad value) makes Arrow refuse, and the column is read as text.
    time_types = [pa.timestamp("ns"), pa.string()] if spec.time_format in ("auto", "iso") else [pa.string()]
    for time_type in time_types:
        types[spec.columns["time"]] = time_type
        try:
            return _read_blocks(spec, path, header, delimiter, types, learner, wanted_ids)
        except pa.ArrowInvalid as error:
            if time_type == pa.string() or "timestamp" not in str(error):
                raise
    raise AssertionError("unreachable")


def _read_blocks(spec: LogSpec, path: Path, header: list[str], delimiter: str, types: dict,
                 learner: str, wanted_ids: pa.Array | None) -> tuple[pa.Table, np.ndarray, int]:
    name = str(path)
    wanted = sorted(types)
    for newlines_in_values in (False, True):
        try:
            reader = pacsv.open_csv(
                path,
                read_options=pacsv.ReadOptions(encoding=spec.encoding if codecs.lookup(spec.encoding).name != "utf-8"
                                               else "utf8", column_names=header, skip_rows=1,
                                               block_size=BLOCK_BYTES, use_threads=True),
                parse_options=pacsv.ParseOptions(delimiter=delimiter, newlines_in_values=newlines_in_values),
                convert_options=pacsv.ConvertOptions(include_columns=wanted, column_types=types,
                                                     strings_can_be_null=False, quoted_strings_can_be_null=False))
            batches, row_blocks, rows_read = [], [], 0
            for batch in reader:
                rows = np.arange(rows_read + 1, rows_read + batch.num_rows + 1, dtype=np.int64)
                rows_read += batch.num_rows
                if wanted_ids is not None:
                    keep = _learner_mask(batch.column(batch.schema.get_field_index(learner)), wanted_ids)
                    batch, rows = batch.filter(pa.array(keep)), rows[keep]
                batches.append(batch)
                row_blocks.append(rows)
            table = pa.Table.from_batches(batches, schema=reader.schema)
            return table, np.concatenate(row_blocks) if row_blocks else np.zeros(0, np.int64), rows_read
        except pa.ArrowInvalid as error:
            message = str(error)
            if "invalid UTF8" in message:
                raise InputError(name, _first_bad_byte(path), f"is not valid {spec.encoding} text; "
                                 "set encoding = \"...\" (e.g. \"cp1252\") in its [[logs]] entry") from None
            if "conversion error" in message:
                raise  # a time column Arrow would not read as naive stamps: _read_arrow retries as text
            if not newlines_in_values:
                continue
            row, shown, fields = _first_bad_record(path, _encoding(spec), delimiter, len(header))
            raise InputError(name, f"row {row}" if row else None, f"cannot be read as CSV ({shown[:60]!r} has "
                             f"{fields} fields, the header {len(header)}); check quotes and delimiters on that line") from None
    raise AssertionError("unreachable")


def _first_bad_record(path: Path, encoding: str, delimiter: str, width: int) -> tuple[int | None, str, int]:
    """(data row, its text, its field count) of the first record whose width is not the
    header's -- the error path only, read with the csv module as a stream."""
    with open(path, encoding=encoding, newline="") as handle:
        records = csv.reader(handle, delimiter=delimiter)
        next(records, None)
        number = 0
        for record in records:
            if not record:
                continue  # blank lines are not rows (Arrow skips them too)
            number += 1
            if len(record) != width:
                return number, delimiter.join(record), len(record)
    return None, "", 0


def _learner_mask(column: pa.Array, wanted: pa.Array) -> np.ndarray:
    """Rows whose learner (spaces trimmed) is one of ``wanted``; decided on the dictionary."""
    hit = pc.is_in(pc.utf8_trim_whitespace(column.dictionary), wanted).to_numpy(zero_copy_only=False)
    return np.append(hit, False)[pc.fill_null(column.indices, -1).to_numpy(zero_copy_only=False)]


def _first_bad_byte(path: Path) -> str:
    """Where a file stops being UTF-8: "line L byte B" (read in blocks, for the error path only)."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    offset, lines = 0, 1
    with open(path, "rb") as handle:
        while block := handle.read(BLOCK_BYTES):
            try:
                decoder.decode(block)
            except UnicodeDecodeError as error:
                line = lines + block.count(b"\n", 0, error.start)
                return f"line {line} byte {offset + error.start}"
            offset += len(block)
            lines += block.count(b"\n")
    return f"byte {offset}"



def empty_file(spec: LogSpec, name: str, what: str) -> tuple[None, LocalTimeCounts, list[str], int]:
    """A file without rows: one part of a folder entry is skipped with a warning (engines
    write empty parts of a dataset); a file named alone is refused."""
    if not spec.path.is_dir():
        raise InputError(name, None, f"{what}; export the log again or remove its [[logs]] entry")
    return None, LocalTimeCounts(), [f"{name} {what} (an empty part of {spec.path}); skipped"], 0


def events_from_columns(table: pd.DataFrame, spec: LogSpec, name: str,
                        rows: np.ndarray) -> tuple[pd.DataFrame, LocalTimeCounts, list[str], int]:
    """A table holding the mapped columns -> (EVENTS rows, DST counts, warnings, rows read).

    Shared by the CSV and Parquet readers: it decides what an empty learner or a
    non-numeric duration means.  The readers have already cut the rows to the wanted
    learners (on the dictionary, before any time is parsed).
    """
    columns = spec.columns
    warnings: list[str] = []
    rows_read = len(table)
    time_ns, counts = parse_time_column(table[columns["time"]], spec.time_format, spec.timezone,
                                        name, columns["time"], rows)
    duration = None
    if "duration" in columns:
        duration = _durations(table[columns["duration"]], name, columns["duration"], rows)

    def role(key: str):
        return table[columns[key]] if key in columns else None

    events = build_events(learner=role("learner"), time_ns=time_ns, action=role("action"),
                          outcome=role("outcome"), item=role("item"), skill=role("skill"),
                          duration_s=duration, source=name, source_row=rows)
    no_learner = (events["learner"] == "").to_numpy()
    if no_learner.any():
        warnings.append(f"{name}: {int(no_learner.sum())} rows without a learner were left out "
                        f"(first row {int(rows[np.flatnonzero(no_learner)[0]])})")
        events = events.loc[~no_learner]
        events["learner"] = events["learner"].cat.remove_unused_categories()
    return events, counts, warnings, rows_read


def _durations(values: pd.Series, name: str, column: str, rows: np.ndarray) -> np.ndarray:
    if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(values.dtype):
        seconds = values.to_numpy(dtype=np.float64, na_value=np.nan)
        check_durations(seconds, name, column, rows)
        return seconds
    trimmed = pc.utf8_trim_whitespace(pa.array(values.astype("str")))
    try:  # Arrow's cast when every text is a number; the exact path below names the first that is not
        numbers = pc.cast(pc.if_else(pc.equal(trimmed, ""), pa.scalar(None, pa.string()), trimmed), pa.float64())
        seconds = numbers.to_numpy(zero_copy_only=False)
        written_nan = pc.fill_null(pc.is_nan(numbers), False)  # empty cells are nulls, not NaN
        if not pc.any(written_nan).as_py():  # a written "nan" is not a duration: the exact path names it
            check_durations(seconds, name, column, rows)
            return seconds
    except pa.ArrowInvalid:
        pass
    text = values.astype("str").str.strip()
    numbers = pd.to_numeric(text.where(text != ""), errors="coerce")
    bad = (numbers.isna() & text.notna() & (text != "")).to_numpy()
    if bad.any():
        first = np.flatnonzero(bad)[0]
        raise InputError(name, f"column {column}, row {int(rows[first])}",
                         f"{text.iloc[first][:40]!r} is not a number of seconds"
                         + ("; it looks like a decimal comma: export the log with a decimal point (1.5)"
                            if DECIMAL_COMMA.fullmatch(text.iloc[first]) else ""))
    seconds = numbers.to_numpy(dtype=np.float64, na_value=np.nan)
    check_durations(seconds, name, column, rows)
    return seconds
