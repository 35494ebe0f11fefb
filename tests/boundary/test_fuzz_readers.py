"""Fuzzing every reader and the command-line numbers through the real entry point.

The property, for any generated input: exit 0, or exit 2 with exactly one stderr line;
never a traceback (``call_cli`` lets an unexpected exception through, failing the test);
when the run fails, the store's rows and the output path are unchanged.  Inputs are
built from valid files with one part replaced by a generated value (a TOML value of any
type, a CSV cell of any text, a JSON value of any shape, a number of any size), so the
readers are pushed past their first check.
"""
from __future__ import annotations

import json
import math
import os
import shutil
import tempfile
from functools import cache
from pathlib import Path

import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.boundary.corpus import (
    CSV_LOG_ENTRY, DEMO_STUDY, GOOD_LOG, PARQUET_LOG_ENTRY, STUDY_HEAD, XAPI_LOG_ENTRY, make_study, parquet_bytes,
    statement, store_rows,
)
from tests.conftest import call_cli

# A few examples per reader in the suite (it must stay fast); FIELDMARK_FUZZ=N runs N per reader.
EXAMPLES = int(os.environ.get("FIELDMARK_FUZZ", "0"))
FAST = settings(max_examples=EXAMPLES or 8, deadline=None, suppress_health_check=list(HealthCheck),
                derandomize=not EXAMPLES)
SLOW = settings(max_examples=EXAMPLES or 3, deadline=None, suppress_health_check=list(HealthCheck),
                derandomize=not EXAMPLES)


@cache
def _pristine() -> Path:
    return make_study(Path(tempfile.mkdtemp(prefix="fieldmark-fuzz-")) / "study")


def _fresh(name: str) -> Path:
    """A working copy of the small study (one per test, reused across its examples)."""
    target = _pristine().parent / name
    if not target.exists():
        shutil.copytree(_pristine(), target)
    return target


def assert_clean(argv: list[str], store: Path, out: Path | None = None) -> None:
    """Exit 0, or exit 2 with one line and the store and output untouched."""
    before = store_rows(store)
    result = call_cli(*map(str, argv))
    assert result.returncode in (0, 2), (result.returncode, result.stderr)
    assert "Traceback" not in result.stderr
    if result.returncode == 2:
        lines = [line for line in result.stderr.splitlines() if line.strip() and "%|" not in line]
        assert len(lines) == 1, result.stderr
        assert store_rows(store) == before
        assert out is None or not out.exists()


# -- values ------------------------------------------------------------------------
numbers = st.one_of(st.integers(min_value=-(2**70), max_value=2**70),
                    st.floats(allow_nan=True, allow_infinity=True))
texts = st.text(max_size=30)
json_values = st.recursive(
    st.one_of(st.none(), st.booleans(), numbers.filter(lambda n: not isinstance(n, float) or math.isfinite(n)), texts),
    lambda inner: st.one_of(st.lists(inner, max_size=3), st.dictionaries(texts, inner, max_size=3)),
    max_leaves=8,
)
cells = st.one_of(
    texts, numbers.map(str),
    st.sampled_from(["", " ", "inf", "-inf", "nan", "NaN", "1e300", "-1", "0", "2026-03-10 08:55:36", "1500-01-01",
                     "9999-12-31T23:59:59Z", "2026-03-10T08:55:30+01:00", "2026-03-10T08:55:30", "\x00", '"', "a,b",
                     "L01", "on_task", "focused", "n-5920", "\ufeff"]),
)


def toml_value(value: object) -> str:
    """A Python value as a TOML value (floats keep inf and nan, which TOML has)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf") if math.isinf(value) else repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(item) for item in value) + "]"
    return "{" + ", ".join(f"{json.dumps(str(k))} = {toml_value(v)}" for k, v in value.items()) + "}"


toml_values = st.recursive(st.one_of(st.booleans(), numbers, texts),
                           lambda inner: st.one_of(st.lists(inner, max_size=3),
                                                   st.dictionaries(st.text("abcxyz", min_size=1, max_size=4), inner,
                                                                   max_size=2)),
                           max_leaves=6)


def csv_line(values: list[str]) -> str:
    return ",".join('"' + v.replace('"', '""') + '"' if any(c in v for c in ',"\n\r') else v for v in values) + "\n"


def _import_probe(study: Path) -> Path:
    probe = study.parent / f"{study.name}-probe.csv"
    probe.write_text("coder,learner,time,activity\nana,L01,2026-03-10T08:55:30+01:00,on_task\n")
    return probe


# -- the study folder's own files ---------------------------------------------------
STUDY_KEYS = ["study.name", "study.timezone", "schedule.window_seconds", "schedule.order", "schedule.seed",
              "logs.path", "logs.format", "logs.timezone", "logs.delimiter", "logs.encoding", "logs.time_format",
              "logs.columns.time"]


@FAST
@given(key=st.sampled_from(STUDY_KEYS), value=toml_values)
def test_study_toml_any_value_in_any_key(key: str, value: object) -> None:
    study = _fresh("study_toml")
    lines = (STUDY_HEAD + CSV_LOG_ENTRY.format(name="tiny.csv")).splitlines()
    section, name = key.rsplit(".", 1)
    header = {"study": "[study]", "schedule": "[schedule]", "logs": "[[logs]]", "logs.columns": "[logs.columns]"}[section]
    start = lines.index(header)
    for number in range(start + 1, len(lines)):
        if lines[number].startswith(f"{name} ="):
            lines[number] = f"{name} = {toml_value(value)}"
            break
    (study / "study.toml").write_text("\n".join(lines) + "\n")
    assert_clean(["import", study, _import_probe(study)], study / "observations.sqlite")


@FAST
@given(position=st.integers(min_value=0, max_value=60), value=toml_values)
def test_scheme_toml_any_value_on_any_line(position: int, value: object) -> None:
    study = _fresh("scheme_toml")
    lines = (DEMO_STUDY / "scheme.toml").read_text().splitlines()
    assignments = [number for number, line in enumerate(lines) if " = " in line and not line.startswith("#")]
    number = assignments[position % len(assignments)]
    lines[number] = lines[number].split(" = ")[0] + " = " + toml_value(value)
    (study / "scheme.toml").write_text("\n".join(lines) + "\n")
    assert_clean(["import", study, _import_probe(study)], study / "observations.sqlite")


@FAST
@given(row=st.integers(min_value=0, max_value=12), column=st.integers(min_value=0, max_value=4), cell=cells,
       bom=st.booleans())
def test_roster_any_cell(row: int, column: int, cell: str, bom: bool) -> None:
    study = _fresh("roster")
    lines = [line.split(",") for line in (DEMO_STUDY / "roster.csv").read_text().splitlines()]
    lines[row][column] = cell
    text = "".join(csv_line(line) for line in lines)
    (study / "roster.csv").write_bytes((b"\xef\xbb\xbf" if bom else b"") + text.encode("utf-8", "surrogatepass"))
    assert_clean(["import", study, _import_probe(study)], study / "observations.sqlite")


# -- files a verb is given ----------------------------------------------------------
OBSERVATION_HEADER = ["coder", "learner", "time", "end", "device", "note", "clip", "activity", "affect"]
GOOD_ROW = ["ana", "L01", "2026-03-10T08:55:30+01:00", "", "", "", "", "on_task", "focused"]


@FAST
@given(edits=st.lists(st.tuples(st.integers(0, 2), st.integers(0, len(GOOD_ROW) - 1), cells), max_size=4),
       header_cell=st.one_of(st.none(), st.tuples(st.integers(0, len(OBSERVATION_HEADER) - 1), cells)))
def test_observation_csv_any_cells(edits: list[tuple[int, int, str]], header_cell) -> None:
    study = _fresh("observations")
    header = list(OBSERVATION_HEADER)
    if header_cell is not None:
        header[header_cell[0]] = header_cell[1]
    rows = [list(GOOD_ROW) for _ in range(3)]
    for row, column, cell in edits:
        rows[row][column] = cell
    path = study.parent / "observations-fuzz.csv"
    path.write_text(csv_line(header) + "".join(map(csv_line, rows)), encoding="utf-8", errors="surrogatepass")
    assert_clean(["import", study, path], study / "observations.sqlite")


@FAST
@given(cells_=st.lists(st.tuples(st.integers(0, 3), st.integers(0, 4), cells), max_size=4))
def test_adjudication_csv_any_cells(cells_: list[tuple[int, int, str]]) -> None:
    study = _fresh("adjudications")
    rows = [["unit-x", "activity", "on_task", "lead", "agreed"] for _ in range(4)]
    for row, column, cell in cells_:
        rows[row][column] = cell
    path = study.parent / "adjudications-fuzz.csv"
    path.write_text(csv_line(["unit", "dimension", "code", "adjudicator", "reason"]) + "".join(map(csv_line, rows)),
                    encoding="utf-8", errors="surrogatepass")
    assert_clean(["adjudicate", study, path], study / "observations.sqlite")


@FAST
@given(header=st.lists(st.sampled_from(["unit", "coder", "activity", "learner", "time", "session_id", "note", "x"]),
                       min_size=1, max_size=5),
       rows=st.lists(st.lists(cells, min_size=1, max_size=5), max_size=6))
def test_long_format_csv_any_table(header: list[str], rows: list[list[str]]) -> None:
    study = _fresh("long")
    path = study.parent / "long-fuzz.csv"
    path.write_text(csv_line(header) + "".join(map(csv_line, rows)), encoding="utf-8", errors="surrogatepass")
    assert_clean(["agree", path, "--resamples", "3"], study / "observations.sqlite")


# -- logs ---------------------------------------------------------------------------
@SLOW
@given(row=st.integers(0, 2), column=st.integers(0, 6), cell=cells)
def test_csv_log_any_cell(row: int, column: int, cell: str) -> None:
    study = _fresh("csv_log")
    lines = [line.split(",") for line in GOOD_LOG.splitlines()]
    lines[row][column] = cell
    (study / "logs" / "tiny.csv").write_text("".join(map(csv_line, lines)), encoding="utf-8", errors="surrogatepass")
    assert_clean(["align", study, "--json"], study / "observations.sqlite")


@SLOW
@given(column=st.sampled_from(["trainee", "timestamp", "event", "result", "seconds"]),
       values=st.one_of(st.lists(numbers, min_size=2, max_size=2), st.lists(texts, min_size=2, max_size=2),
                        st.lists(st.booleans(), min_size=2, max_size=2)))
def test_parquet_log_any_column(column: str, values: list) -> None:
    study = _fresh("parquet_log")
    frame = pd.DataFrame({"trainee": ["n-5920"] * 2, "timestamp": ["2026-03-10 08:55:36.459"] * 2,
                          "event": ["attempt"] * 2, "result": ["pass"] * 2, "seconds": [6.7, 7.9]})
    frame[column] = values
    try:
        content = parquet_bytes(frame)
    except (OverflowError, ValueError, TypeError):  # pyarrow cannot hold the value: no such file can exist
        return
    (study / "logs" / "t.parquet").write_bytes(content)
    (study / "study.toml").write_text(STUDY_HEAD + PARQUET_LOG_ENTRY.format(name="t.parquet"))
    assert_clean(["align", study, "--json"], study / "observations.sqlite")


XAPI_FIELDS = ["actor", "verb", "object", "result", "timestamp", "stored"]


@SLOW
@given(field=st.sampled_from(XAPI_FIELDS), value=json_values, lines=st.booleans(), tail=st.sampled_from(["", "", "x", "[]"]))
def test_xapi_any_field(field: str, value: object, lines: bool, tail: str) -> None:
    study = _fresh("xapi_log")
    statements = [statement(), statement(**{field: value})]
    if lines:
        text, name = "".join(json.dumps(s) + "\n" for s in statements) + tail, "x.jsonl"
    else:
        text, name = json.dumps(statements) + tail, "x.json"
    for old in (study / "logs").glob("x.*"):
        old.unlink()
    (study / "logs" / name).write_text(text)
    (study / "study.toml").write_text(STUDY_HEAD + XAPI_LOG_ENTRY.format(name=name))
    assert_clean(["align", study, "--json"], study / "observations.sqlite")


# -- another device's store -----------------------------------------------------------
STORE_COLUMNS = [("observations", "learner"), ("observations", "window_start_ns"), ("observations", "window_end_ns"),
                 ("codes", "code"), ("codes", "dimension"), ("sessions", "scheme_hash"), ("adjudications", "at_ns"),
                 ("sync_marks", "marked_ns"), ("notes", "text")]


@SLOW
@given(target=st.sampled_from(STORE_COLUMNS), value=st.one_of(numbers, texts, st.none(), st.binary(max_size=8)))
def test_foreign_store_any_value(target: tuple[str, str], value: object) -> None:
    import sqlite3

    study = _fresh("foreign")
    path = study.parent / "device.sqlite"
    shutil.copyfile(DEMO_STUDY.parent / "devices" / "laptop-b" / "observations.sqlite", path)
    table, column = target
    connection = sqlite3.connect(path)
    try:
        connection.executescript(f"DROP TRIGGER IF EXISTS {table}_no_update; PRAGMA foreign_keys = OFF;")
        if isinstance(value, int) and not -(2**63) <= value < 2**63:
            value = str(value)
        connection.execute(f'UPDATE "{table}" SET "{column}" = ? WHERE rowid = (SELECT min(rowid) FROM "{table}")',
                           (value,))
        connection.commit()
    except sqlite3.IntegrityError:  # NOT NULL: such a file cannot be written
        return
    finally:
        connection.close()
    assert_clean(["import", study, path], study / "observations.sqlite")


# -- command-line numbers -----------------------------------------------------------
number_text = st.one_of(numbers.map(str), st.sampled_from(["1e300", "-1e300", "inf", "nan", "-0", "1e-300"]))


@FAST
@given(option=st.sampled_from(["--resamples", "--seed", "--rolling-window", "--certify-kappa", "--certify-pairs"]),
       value=number_text)
def test_agree_numbers(option: str, value: str) -> None:
    study = _fresh("agree_options")
    extra = ["--certify", "coder_a"] if option.startswith("--certify") else []
    resamples = [] if option == "--resamples" else ["--resamples", "3"]
    assert_clean(["agree", study, *resamples, *extra, option, value], study / "observations.sqlite")


@SLOW
@given(option=st.sampled_from(["--before", "--after", "--rapid-seconds", "--top-actions"]), value=number_text)
def test_export_numbers(option: str, value: str) -> None:
    study = _fresh("export_options")
    out = study.parent / "fuzz-windows.csv"
    out.unlink(missing_ok=True)
    assert_clean(["export", study, "--out", out, option, value], study / "observations.sqlite", out)


@FAST
@given(option=st.sampled_from(["--kappa", "--width", "--seed", "--prevalence"]), value=number_text)
def test_plan_numbers(option: str, value: str) -> None:
    study = _fresh("plan_options")
    arguments = {"--kappa": "0.7", "--width": "0.3", "--prevalence": "0.5,0.5", "--seed": "1"}
    arguments[option] = value if option != "--prevalence" else f"{value},0.5"
    assert_clean(["plan", *[part for pair in arguments.items() for part in pair]], study / "observations.sqlite")


@FAST
@given(value=number_text, device=st.sampled_from(["laptop-a", "laptop-b"]))
def test_align_offsets(value: str, device: str) -> None:
    study = _fresh("align_options")
    assert_clean(["align", study, "--json", "--set-offset", f"{device}={value}"], study / "observations.sqlite")


# -- a windows file for check -------------------------------------------------------
MANIFEST = {"format": "csv", "label_columns": ["activity"], "feature_columns": ["events"], "group_column": "group"}


@FAST
@given(key=st.sampled_from(sorted(MANIFEST) + ["data_sha256"]), value=json_values,
       cell=st.one_of(st.none(), st.tuples(st.integers(0, 39), st.integers(0, 2), cells)))
def test_windows_file_any_manifest_value_or_cell(key: str, value: object, cell) -> None:
    study = _fresh("windows")
    rows = [[f"p-{i % 4}", "on" if i % 2 else "off", str(i)] for i in range(40)]
    if cell is not None:
        rows[cell[0]][cell[1]] = cell[2]
    path = study.parent / "windows-fuzz.csv"
    path.write_text(csv_line(["group", "activity", "events"]) + "".join(map(csv_line, rows)),
                    encoding="utf-8", errors="surrogatepass")
    (study.parent / "windows-fuzz.manifest.json").write_text(json.dumps({**MANIFEST, key: value}))
    assert_clean(["check", path, "--folds", "2"], study / "observations.sqlite")
