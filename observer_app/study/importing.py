"""Observations coded elsewhere: another device's store, or a CSV from any tool.

CSV columns: coder, learner, time (ISO 8601 with offset: when the observed window
began), optional device (defaults to the coder), optional note, optional end (ISO 8601,
the window's end; default time + window_seconds), optional clip (replay coding), and
one column per scheme dimension (empty = not coded).  Rows are identified by their
content (coder, device, learner, time), so importing a file twice adds nothing.
"""
from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from export.writer import file_sha256
from observer_app.study.foreign_store import read_foreign_store
from observer_app.study.store import RowConflict, Store, now_utc
from observer_app.study.folder import Study
from sync.clock import NAT
from sync.csv_header import check_header
from sync.errors import InputError
from sync.plausible_values import LONGEST_WINDOW_SECONDS, RANGE_TEXT, outside_range, utc_ns

NAMESPACE = uuid.UUID("6f1c2a3e-9a7b-4d1e-8c55-2b0d3f4e5a61")
REQUIRED = ("coder", "learner", "time")
OPTIONAL = ("device", "note", "end", "clip")
_OFFSET = r"(?:Z|z|[+-]\d{2}(?::?\d{2})?)$"
_OFFSET_PARTS = r"(?:[Zz]|(?P<sign>[+-])(?P<hours>\d{2})(?::?(?P<minutes>\d{2}))?)$"
_CONTROL = r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]"
SHOWN_PROBLEMS = 3

# The schedule order written on sessions that came from a CSV: they have no end row, yet
# nothing about them can be resumed (observer_app/coding/live.py leaves them alone).
IMPORTED_ORDER = "imported"


@dataclass
class ImportResult:
    source: Path
    added: dict[str, int] = field(default_factory=dict)
    skipped: list[str] = field(default_factory=list)
    already_imported: bool = False


def import_file(study: Study, store: Store, path: Path, *, skip_bad: bool = False,
                offsets_as_written: bool = False) -> ImportResult:
    """Import one file into the study's store; InputError for anything the user must fix."""
    if not path.is_file():
        raise InputError(path, None, "file not found")
    with path.open("rb") as handle:
        magic = handle.read(16)
    if magic.startswith(b"SQLite format 3"):
        return _import_store(study, store, path)
    return _import_csv(study, store, path, skip_bad=skip_bad, offsets_as_written=offsets_as_written)


# -- another device's store ---------------------------------------------------------
def _import_store(study: Study, store: Store, path: Path) -> ImportResult:
    # Every code is checked against the scheme (foreign_store), not the scheme's hash: a device whose scheme
    # differs only in labels, keys or colours codes the same thing (observer_app/study/scheme_binding.py).
    foreign = read_foreign_store(path, study)
    decisions = foreign.rows.pop("adjudications", None)
    try:
        added = store.append_rows(foreign.rows)
    except RowConflict as conflict:
        raise InputError(path, f"table {conflict.table}", f"row {conflict.row_id} differs from the study's row with "
                         "the same id; the file was edited, keep the study's copy") from None
    result = ImportResult(source=path, added={k: v for k, v in added.items() if v})
    for table, count in foreign.left_out.items():
        result.skipped.append(f"{count} {table} rows: never imported (align fits each device's clock in the study)")
    if decisions is not None and len(decisions):
        _import_adjudications(study, store, path, decisions, result)
    return result




def _import_adjudications(study: Study, store: Store, path: Path, decisions: pd.DataFrame,
                          result: ImportResult) -> None:
    """Adjudications that settle observations forming one of the study's units (after this import's
    observations); the rest are reported, never stored."""
    from observer_app.pipeline.units import placed_adjudications, study_units  # pairing: only when needed

    found = study_units(study)
    probe = decisions.assign(at=decisions["at_ns"])
    if "observations" not in probe:
        probe["observations"] = ""
    placed, _ = placed_adjudications(found, probe)
    known = decisions["adjudication_id"].isin(set(placed["adjudication_id"]))
    if (~known).any():
        result.skipped.append(f"{int((~known).sum())} adjudications: they settle no unit of the study "
                              "(first {}); record them in the study with fieldmark adjudicate".format(
                                  decisions.loc[~known, "unit"].iloc[0]))
    try:
        added = store.append_rows({"adjudications": decisions[known]})
    except RowConflict as conflict:
        raise InputError(path, f"table {conflict.table}", f"row {conflict.row_id} differs from the study's row with "
                         "the same id; the file was edited, keep the study's copy") from None
    if added.get("adjudications"):
        result.added["adjudications"] = added["adjudications"]


# -- CSV --------------------------------------------------------------------------
def _import_csv(study: Study, store: Store, path: Path, *, skip_bad: bool, offsets_as_written: bool) -> ImportResult:
    content_hash = file_sha256(path)
    check_header(path)
    try:
        frame = pd.read_csv(path, dtype="string", keep_default_na=False, skipinitialspace=True, encoding="utf-8-sig")
    except pd.errors.EmptyDataError:
        raise InputError(path, None, "empty file; expected a header line coder,learner,time,<dimensions>") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as error:
        raise InputError(path, None, f"not a readable CSV ({str(error).splitlines()[0]}); save it as UTF-8 CSV") from None
    frame.columns = [c.strip() for c in frame.columns]
    dimensions = study.scheme.dimension_names
    for column in REQUIRED:
        if column not in frame.columns:
            raise InputError(path, "line 1", f"missing column {column!r}; the header needs coder,learner,time and one column per dimension")
    allowed = set(REQUIRED) | set(OPTIONAL) | set(dimensions)
    unknown = [c for c in frame.columns if c not in allowed]
    if unknown:
        raise InputError(path, "line 1", f"unknown column {unknown[0]!r}; dimensions in scheme.toml are {', '.join(dimensions)}")
    present_dimensions = [d for d in dimensions if d in frame.columns]
    if not present_dimensions:
        raise InputError(path, "line 1", f"no dimension column; add at least one of {', '.join(dimensions)}")
    if frame.empty:
        raise InputError(path, None, "no rows below the header; nothing to import")
    frame = frame.apply(lambda column: column.str.strip())
    for column in OPTIONAL:
        if column not in frame.columns:
            frame[column] = ""
    problems = _row_problems(study, frame, present_dimensions)
    lines = pd.Series(range(2, len(frame) + 2), index=frame.index)
    bad = problems.ne("")
    skipped = [f"line {lines[i]}: {problems[i]}" for i in frame.index[bad]]
    if bad.any() and not skip_bad:
        shown = "; ".join(skipped[:SHOWN_PROBLEMS])
        more = f" (and {len(skipped) - SHOWN_PROBLEMS} more bad rows)" if len(skipped) > SHOWN_PROBLEMS else ""
        raise InputError(path, None, f"{shown}{more}; fix these rows or rerun with --skip-bad to import the rest")
    if not offsets_as_written:
        _refuse_foreign_offsets(study, path, frame[~bad], lines[~bad])
    _refuse_conflicts(path, frame[~bad], lines[~bad], present_dimensions)
    good = frame[~bad].copy()
    result = ImportResult(source=path, skipped=skipped)
    if good.empty:
        return result
    good["device"] = good["device"].mask(good["device"].eq(""), good["coder"])
    start = pd.to_datetime(good["time"], format="ISO8601", utc=True)
    end = pd.to_datetime(good["end"].mask(good["end"].eq("")), format="ISO8601", utc=True)
    good["window_start"] = start
    good["window_end"] = end.fillna(start + pd.Timedelta(seconds=study.window_seconds))
    good["coded_at"] = good["window_end"]
    good["mode"] = good["clip"].ne("").map({True: "replay", False: "live"})
    good["session_id"] = [str(uuid.uuid5(NAMESPACE, f"csv-session|{c}|{d}|{m}|{content_hash}"))
                          for c, d, m in zip(good["coder"], good["device"], good["mode"])]
    good["observation_id"] = [str(uuid.uuid5(NAMESPACE, f"csv|{c}|{d}|{l}|{t.value}|{k}"))
                              for c, d, l, t, k in zip(good["coder"], good["device"], good["learner"],
                                                       good["window_start"], good["clip"])]
    good["scheme_hash"] = study.scheme.content_hash
    good["slot"] = pd.NA
    for dimension in present_dimensions:
        good[dimension] = good[dimension].mask(good[dimension].eq(""))
    sessions = good.groupby("session_id", as_index=False).agg(
        coder=("coder", "first"), device=("device", "first"), mode=("mode", "first"), started_at=("window_start", "min"))
    sessions["paired_start"] = pd.NaT
    sessions["monotonic_start"] = 0.0
    sessions["window_seconds"] = study.window_seconds
    sessions["order"] = IMPORTED_ORDER
    sessions["seed"] = pd.NA
    sessions["scheme_hash"] = study.scheme.content_hash
    added = store.record_observations(sessions, good, present_dimensions)
    store.record_import(content_hash, str(path), now_utc())
    result.added = {"observations": added} if added else {}
    return result


def _row_problems(study: Study, frame: pd.DataFrame, dimensions: list[str]) -> pd.Series:
    """One reason per row ("" when the row is fine), computed column by column."""
    problems = pd.Series("", index=frame.index, dtype="object")

    def flag(mask: pd.Series, reason: str | pd.Series) -> None:
        nonlocal problems
        problems = problems.mask(mask & problems.eq(""), reason)

    for column in frame.columns:
        flag(frame[column].str.contains(_CONTROL, regex=True), f"{column} holds a control character; retype the cell")
    flag(frame["coder"].eq(""), "empty coder")
    flag(frame["learner"].eq(""), "empty learner")
    flag(~frame["learner"].isin(study.roster["learner"].dropna()) & frame["learner"].ne(""),
         "learner '" + frame["learner"] + "' not in roster.csv")
    for column in ("time", "end"):
        text = frame[column]
        given = text.ne("")
        parsed = pd.to_datetime(text.mask(~given), format="ISO8601", utc=True, errors="coerce")
        flag(given & parsed.isna(), f"{column} is not an ISO 8601 time")
        flag(given & parsed.notna() & ~text.str.contains(_OFFSET, regex=True),
             f"{column} has no UTC offset; write it like 2026-03-02T09:15:00+01:00")
        flag(outside_range(parsed), f"{column} is not {RANGE_TEXT}; fix the date")
    flag(frame["time"].eq(""), "empty time")
    length = _window_length_s(study, frame)
    flag(length.le(0), "end is not after time; the window must end after it starts")
    flag(length.gt(LONGEST_WINDOW_SECONDS), f"window longer than {LONGEST_WINDOW_SECONDS:.0f} s; check the end time")
    for dimension in dimensions:
        valid = list(study.scheme.dimension(dimension).code_names)
        values = frame[dimension]
        flag(values.ne("") & ~values.isin(valid),
             f"unknown {dimension} code '" + values + f"' ({dimension} codes: {', '.join(valid)})")
    coded = pd.concat([frame[d].ne("") for d in dimensions], axis=1).any(axis=1)
    flag(~coded, "no code in any dimension")
    return problems


def _window_length_s(study: Study, frame: pd.DataFrame) -> pd.Series:
    """Seconds from time to end per row (NaN where either cannot be read); no end: the study's window."""
    start = utc_ns(pd.to_datetime(frame["time"].mask(frame["time"].eq("")), format="ISO8601", utc=True, errors="coerce"))
    end = utc_ns(pd.to_datetime(frame["end"].mask(frame["end"].eq("")), format="ISO8601", utc=True, errors="coerce"))
    length = pd.Series((end - start) / 1e9, index=frame.index)
    known = (start != NAT) & (end != NAT)
    length = length.where(known)
    return length.mask(frame["end"].eq(""), study.window_seconds)


def _refuse_foreign_offsets(study: Study, path: Path, frame: pd.DataFrame, lines: pd.Series) -> None:
    """Refuse times written at a UTC offset the study's zone did not have at that instant.

    A time written at +01:00 where the study's zone was at +02:00 (summer time forgotten, a
    laptop left on another zone) is an exact but wrong instant: its observation lands an
    hour off the log and pairs with nobody.  UTC (Z, +00:00) is always taken as written."""
    if frame.empty:
        return
    written = frame["time"].str.extract(_OFFSET_PARTS)
    sign = written["sign"].map({"+": 1, "-": -1})
    minutes = sign * (written["hours"].astype("float64") * 60 + written["minutes"].fillna("0").astype("float64"))
    minutes = minutes.where(written["sign"].notna(), 0.0)  # Z / z: UTC
    instant = pd.to_datetime(frame["time"], format="ISO8601", utc=True)
    zone_minutes = (instant.dt.tz_convert(study.timezone).dt.tz_localize(None)
                    - instant.dt.tz_localize(None)).dt.total_seconds() / 60
    foreign = minutes.ne(0) & minutes.ne(zone_minutes)
    if not foreign.any():
        return
    first = foreign.idxmax()
    coders = sorted(frame.loc[foreign, "coder"].unique())
    shown = ", ".join(coders[:SHOWN_PROBLEMS]) + (f" and {len(coders) - SHOWN_PROBLEMS} more" if len(coders) > SHOWN_PROBLEMS else "")
    raise InputError(
        path, f"line {lines[first]}",
        f"time {frame.loc[first, 'time']} is written at UTC{_utc_offset_text(minutes[first])} but {study.timezone} "
        f"(study.toml's timezone) was at UTC{_utc_offset_text(zone_minutes[first])} then, which puts the observation "
        f"{abs(minutes[first] - zone_minutes[first]) / 60:g} h off the log ({int(foreign.sum())} rows like this, "
        f"coder {shown}); correct the offsets (or write UTC with Z), or rerun with --offsets-as-written if the "
        "coder's clock really kept another zone")


def _utc_offset_text(minutes: float) -> str:
    sign = "-" if minutes < 0 else "+"
    hours, rest = divmod(int(abs(minutes)), 60)
    return f"{sign}{hours:02d}:{rest:02d}"


def _refuse_conflicts(path: Path, frame: pd.DataFrame, lines: pd.Series, dimensions: list[str]) -> None:
    """Two rows for the same window (coder, device, learner, time, clip) must say the same; else name both lines.

    Identical repeated rows are fine (importing them adds one observation)."""
    if frame.empty:
        return
    keys = pd.DataFrame({
        "coder": frame["coder"], "device": frame["device"].mask(frame["device"].eq(""), frame["coder"]),
        "learner": frame["learner"], "clip": frame["clip"],
        "start": utc_ns(pd.to_datetime(frame["time"], format="ISO8601", utc=True, errors="coerce")),
    })
    content = frame[dimensions + ["note", "end"]]
    same_window = keys.duplicated(keep=False)
    if not same_window.any():
        return
    rows = pd.concat([keys, content], axis=1)[same_window]
    distinct = rows.drop_duplicates()
    conflicting = distinct[distinct.duplicated(list(keys.columns), keep=False)]
    if conflicting.empty:
        return
    first = conflicting.iloc[0]
    clash = rows.index[(rows[list(keys.columns)] == first[list(keys.columns)]).all(axis=1)]
    different = [i for i in clash if not rows.loc[i].equals(rows.loc[clash[0]])]
    raise InputError(path, f"lines {lines[clash[0]]} and {lines[different[0]]}",
                     f"two different rows for coder {first['coder']!r}, learner {first['learner']!r} at the same "
                     "time; keep the right one and delete the other")
