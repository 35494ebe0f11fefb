"""xAPI statements -> EVENTS, per xAPI 1.0.3 (and 2.0 / IEEE 9274.1.1 where it differs).

A file holds JSON lines, a JSON array, or pages of results as a learning record store
hands them over (``{"statements": [...], "more": ...}``), optionally gzipped; a folder
entry reads every file.  Files are read in blocks (sync/json_blocks.py), so memory grows
with the events kept, not the file: a plain JSON-lines file is parsed by Arrow's JSON
reader, two blocks at a time in threads, and turned into events column by column;
anything else, or a file Arrow's path refuses, is decoded by msgspec (the exact path,
which names the line of every error).  Both read the few fields below (Arrow's schema
is derived from the msgspec Structs).
Mapping (section numbers are xAPI 1.0.3 Part Two):
  learner    actor's Inverse Functional Identifier (2.4.2.3): account.name, else mbox
             (the "mailto:" IRI as written), else mbox_sha1sum, else openid.  Identified
             Groups count as one learner; anonymous Groups (members only) are left out.
             When the logs' accounts come from several homePages, an account learner is
             written ``homePage|name`` (and a warning says so), so none are merged.
  time_ns    timestamp (2.4.7); when a statement has none, stored (2.4.8) -- counted.
             Stamps without an offset are local to the entry's timezone.
  action     verb.id (2.4.3)
  outcome    result.success (2.4.5) true -> "correct", false -> "incorrect"; otherwise
             result.completion true -> "completed"; otherwise "".
  item       object.id (2.4.4) ("" for objects without an id)
  duration_s result.duration, an ISO 8601 duration (4.6): PnW or PnDTnHnMnS with
             fractional seconds.  Years and months have no fixed length, so they are
             refused with the line number.
  source_row the line the statement starts on (JSON lines: its line; array: where the
             statement's object opens; a one-line page: the page's line).
Across all files read together: a statement id seen twice is counted once (the first);
voided statements (2.3.2) are dropped, and the voiding statements are not events.
"""
from __future__ import annotations

import gc
import multiprocessing
import re
from collections import deque
from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor
from contextlib import closing
from dataclasses import dataclass, field
from functools import partial
from itertools import repeat
from pathlib import Path

import msgspec
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.json as pajson

from sync.errors import InputError
from sync.plausible_values import check_durations
from sync.event_table import build_events
from sync.json_blocks import StatementBlocks, parallel_stretches, plain_json_lines, plain_line_blocks
from sync.local_time import LocalTimeCounts
from sync.log_spec import LogSpec
from sync.time_column import parse_time_column

VOIDED = "http://adlnet.gov/expapi/verbs/voided"  # xAPI 1.0.3 Part Two 2.3.2
QUALIFIER = "|"

_DURATION = re.compile(
    r"^P(?:(?P<weeks>\d+(?:[.,]\d+)?)W|(?:(?P<years>\d+(?:[.,]\d+)?)Y)?(?:(?P<months>\d+(?:[.,]\d+)?)M)?"
    r"(?:(?P<days>\d+(?:[.,]\d+)?)D)?(?:T(?:(?P<hours>\d+(?:[.,]\d+)?)H)?(?:(?P<minutes>\d+(?:[.,]\d+)?)M)?"
    r"(?:(?P<seconds>\d+(?:[.,]\d+)?)S)?)?)$"
)
_SECONDS_PER = {"weeks": 604800.0, "days": 86400.0, "hours": 3600.0, "minutes": 60.0, "seconds": 1.0}


def iso_duration_seconds(text: str) -> float:
    """An ISO 8601 duration (xAPI 1.0.3 Part Two 4.6) -> seconds; ValueError if unreadable.

    A decimal comma is accepted as ISO 8601 allows; years and months are refused because
    their length depends on the calendar.
    """
    match = _DURATION.match(text.strip()) if isinstance(text, str) else None
    if match is None or text.strip() in ("P", "PT") or text.strip().endswith("T"):
        raise ValueError(f"{text!r} is not an ISO 8601 duration such as PT1M30.5S")
    parts = match.groupdict()
    if parts["years"] or parts["months"]:
        raise ValueError(f"{text!r} uses years or months, whose length in seconds is not fixed")
    return sum(float(parts[name].replace(",", ".")) * scale for name, scale in _SECONDS_PER.items() if parts[name])




class Account(msgspec.Struct, gc=False):
    homePage: str | None = None
    name: str | None = None


class Actor(msgspec.Struct, gc=False):
    mbox: str | None = None
    mbox_sha1sum: str | None = None
    openid: str | None = None
    account: Account | None = None


class Verb(msgspec.Struct, gc=False):
    id: str | None = None


class Target(msgspec.Struct, gc=False):
    objectType: str | None = None
    id: str | None = None


class Result(msgspec.Struct, gc=False):
    success: bool | None = None
    completion: bool | None = None
    duration: str | None = None


class Statement(msgspec.Struct, gc=False):
    """The fields of a statement (2.4) the event table uses; a page of results has ``statements``."""

    id: str | None = None
    actor: Actor | None = None
    verb: Verb | None = None
    target: Target | None = msgspec.field(default=None, name="object")
    result: Result | None = None
    timestamp: str | None = None
    stored: str | None = None
    statements: list[Statement] | None = None


@dataclass
class StatementPart:
    """One file's statements before the cross-file rules (ids, voiding, homePages) apply."""

    source: str
    table: pa.Table | None
    voided: set[str] = field(default_factory=set)
    home_pages: set[str] = field(default_factory=set)
    counts: LocalTimeCounts = field(default_factory=LocalTimeCounts)
    warnings: list[str] = field(default_factory=list)
    rows_read: int = 0
    used_stored: int = 0
    statements_seen: int = 0
    anonymous: int = 0


def _identities(actors: list[Actor | None]) -> tuple[pa.Array, pa.Array]:
    """(identifier, homePage) per actor (2.4.2.3); homePage only where the account names it."""
    accounts = [actor.account if actor is not None else None for actor in actors]
    names = pa.array([account.name or None if account is not None else None for account in accounts], pa.string())
    homes = pa.array([account.homePage or "" if account is not None else None for account in accounts], pa.string())
    others = pa.array([actor.mbox or actor.mbox_sha1sum or actor.openid or None if actor is not None else None
                       for actor in actors], pa.string())
    named = names.is_valid()
    return pc.if_else(named, names, others), pc.if_else(named, homes, pa.scalar(None, pa.string()))


def _outcome(result: Result | None) -> int:
    if result is None:
        return 0
    if result.success is True:
        return 1
    if result.success is False:
        return 2
    return 3 if result.completion is True else 0


OUTCOME_NAMES = ["", "correct", "incorrect", "completed"]


_SECONDS_ONLY = r"^PT\d+(?:\.\d+)?S$"  # the common shape, read by Arrow without a regex per text


def _durations(texts: list | pa.Array, name: str, lines: np.ndarray) -> np.ndarray:
    """ISO 8601 durations -> seconds, parsing each distinct text once."""
    encoded = (texts if isinstance(texts, pa.Array) else pa.array(texts, pa.string())).dictionary_encode()
    uniques = encoded.dictionary
    seconds = np.full(len(uniques) + 1, np.nan)
    simple = pc.match_substring_regex(uniques, _SECONDS_ONLY).to_numpy(zero_copy_only=False)
    if simple.any():
        digits = pc.utf8_slice_codeunits(uniques.filter(pa.array(simple)), 2, -1)
        seconds[np.flatnonzero(simple)] = pc.cast(digits, pa.float64()).to_numpy(zero_copy_only=False)
    codes = pc.fill_null(encoded.indices, len(uniques)).to_numpy(zero_copy_only=False)
    for position in np.flatnonzero(~simple):
        try:
            seconds[position] = iso_duration_seconds(uniques[position].as_py())
        except ValueError as error:
            line = int(lines[np.flatnonzero(codes == position)[0]])
            raise InputError(name, f"line {line} result.duration", str(error)) from None
    result = seconds[codes]
    check_durations(result, name, "result.duration", lines, "line")
    return result


def _block_table(statements: list[Statement], lines: np.ndarray, spec: LogSpec, name: str,
                 only: frozenset[str] | None, part: StatementPart) -> pa.Table | None:
    """One block's events as a compact Arrow table (text dictionary-encoded)."""
    learner, home = _identities([s.actor for s in statements])
    verb_ids = pa.array([s.verb.id if s.verb is not None else None for s in statements], pa.string())
    targets = [s.target for s in statements]
    identified = learner.is_valid().to_numpy(zero_copy_only=False)
    no_verb = identified & ~verb_ids.is_valid().to_numpy(zero_copy_only=False)
    if no_verb.any():
        raise InputError(name, f"line {int(lines[np.flatnonzero(no_verb)[0]])}",
                         "statement has no verb.id (xAPI 1.0.3 Part Two 2.4.3); fix or remove it")
    voiding = pc.fill_null(pc.equal(verb_ids, VOIDED), False).to_numpy(zero_copy_only=False) & identified
    for position in np.flatnonzero(voiding):
        target = targets[position]
        if target is not None and target.objectType == "StatementRef" and target.id:
            part.voided.add(target.id.lower())
    part.home_pages.update(page for page in pc.unique(home).to_pylist() if page is not None)
    part.rows_read += int(identified.sum())
    keep = identified & ~voiding
    if only is not None:
        qualified = pc.binary_join_element_wise(home, learner, QUALIFIER)
        wanted = pa.array(sorted(only), pa.string())
        keep &= (pc.fill_null(pc.is_in(learner, wanted), False).to_numpy(zero_copy_only=False)
                 | pc.fill_null(pc.is_in(qualified, wanted), False).to_numpy(zero_copy_only=False))
    kept = np.flatnonzero(keep)
    if kept.size == 0:
        return None
    if kept.size < len(statements):
        statements = [statements[i] for i in kept]
        targets = [targets[i] for i in kept]
        learner, home, verb_ids = learner.take(kept), home.take(kept), verb_ids.take(kept)
        lines = lines[kept]
    stamps = [s.timestamp or s.stored for s in statements]
    part.used_stored += sum(1 for s in statements if not s.timestamp)
    time_ns, counts = parse_time_column(pd.Series(stamps, dtype="str"), "iso", spec.timezone,
                                        name, "timestamp", lines, row_word="line")
    part.counts = part.counts + counts
    results = [s.result for s in statements]
    durations = [r.duration if r is not None else None for r in results]
    return pa.table({
        "learner": learner.dictionary_encode(),
        "home": home.dictionary_encode(),
        "time_ns": pa.array(time_ns, pa.int64()),
        "action": verb_ids.dictionary_encode(),
        "outcome": pa.array(np.fromiter(map(_outcome, results), np.int8, len(results))),
        "item": pa.array([t.id if t is not None and t.id is not None else "" for t in targets],
                         pa.string()).dictionary_encode(),
        "duration_s": pa.array(_durations(durations, name, lines), pa.float64()),
        "id": pa.array([s.id for s in statements], pa.string()),
        "row": pa.array(lines, pa.int64()),
    })


def _arrow_type(info: msgspec.inspect.Type) -> pa.DataType:
    """The Arrow type of a Struct field (optional text, flag or nested Struct)."""
    if isinstance(info, msgspec.inspect.UnionType):
        (info,) = [member for member in info.types if not isinstance(member, msgspec.inspect.NoneType)]
    if isinstance(info, msgspec.inspect.StructType):
        return pa.struct([(f.encode_name, _arrow_type(f.type)) for f in info.fields])
    return {msgspec.inspect.StrType: pa.string(), msgspec.inspect.BoolType: pa.bool_()}[type(info)]


_TEXT = pa.string()
# The fields the exact path decodes, for Arrow's reader too (a page's ``statements`` aside:
# pages never take the fast path), so both paths read and type-check the same fields.
ARROW_SCHEMA = pa.schema([(f.encode_name, _arrow_type(f.type)) for f in msgspec.inspect.type_info(Statement).fields
                          if f.name != "statements"])
ARROW_THREADS = 2  # blocks parsed and turned into events at once: Arrow's reader and compute release the lock


def _field(column: pa.Array, *path: str) -> pa.Array:
    """A nested text field with "" read as missing (as the exact path reads it)."""
    value = column
    for name in path:
        value = pc.struct_field(value, name)
    if value.type != _TEXT or value.null_count == len(value):
        return value
    empty = pc.equal(pc.binary_length(value), 0)
    return pc.if_else(empty, pa.scalar(None, _TEXT), value) if pc.any(empty).as_py() else value


def _read_with_arrow(spec: LogSpec, path: Path, only: frozenset[str] | None) -> list[StatementPart] | None:
    """The fast path: a plain JSON-lines file whose every line is one statement of the
    usual shape, each block parsed by Arrow's JSON reader (C++) and turned into events
    column-wise, two blocks at a time in threads.

    Returns None -- and the exact path (msgspec, line by line) reads the file -- when
    anything is unusual: another layout, a blank line, a field of another type, an
    actor without identifier, a statement without verb, any error to report, a file
    that cannot be mapped.
    """
    if not plain_json_lines(path, spec.encoding):
        return None
    read_block = partial(_arrow_chunk, spec=spec, name=str(path), only=only)
    with ThreadPoolExecutor(ARROW_THREADS) as pool:
        try:
            pieces = _arrow_pieces(pool, read_block, path)
        except OSError:  # the file cannot be mapped
            pieces = None
        if pieces is None:
            pool.shutdown(cancel_futures=True)
    return pieces


def _arrow_pieces(pool: ThreadPoolExecutor, read_block, path: Path) -> list[StatementPart] | None:
    """Every block's part, line numbers counted from the file's start; None at the first
    block that needs the exact path."""
    pieces, lines_before = [], 0
    with closing(plain_line_blocks(path)) as blocks:  # closes the file when a block stops early
        for piece, lines in _in_order(pool, read_block, blocks, ahead=ARROW_THREADS):
            if piece is None:
                return None
            if piece.table is not None:
                rows = pc.add(piece.table["row"], lines_before)
                piece.table = piece.table.set_column(piece.table.schema.get_field_index("row"), "row", rows)
            pieces.append(piece)
            lines_before += lines
    return pieces or None


def _in_order(pool: ThreadPoolExecutor, function, items, ahead: int):
    """``function(item)`` for each item, in order, with at most ``ahead`` items waiting
    beyond the one being handed out, so memory stays bounded by a few blocks."""
    pending: deque = deque()
    for item in items:
        pending.append(pool.submit(function, item))
        if len(pending) > ahead:
            yield pending.popleft().result()
    while pending:
        yield pending.popleft().result()


def _arrow_chunk(chunk: memoryview, spec: LogSpec, name: str,
                 only: frozenset[str] | None) -> tuple[StatementPart | None, int]:
    """One block of whole lines -> (its StatementPart with lines counted from the block's
    start, its line count); the part is None when the file needs the exact path."""
    lines = int(np.count_nonzero(np.frombuffer(chunk, np.uint8) == 10)) + (chunk[-1] != ord("\n"))
    try:
        table = pajson.read_json(pa.BufferReader(chunk),
                                 read_options=pajson.ReadOptions(use_threads=False, block_size=len(chunk) + 1),
                                 parse_options=pajson.ParseOptions(explicit_schema=ARROW_SCHEMA,
                                                                   unexpected_field_behavior="ignore"))
        if table.num_rows != lines:  # a blank line: Arrow skips it, so line numbers would shift
            return None, lines
        part = StatementPart(source=name, table=None, statements_seen=lines)
        batch = table.combine_chunks().to_batches()[0]
        part.table = _arrow_block(batch, np.arange(1, lines + 1), spec, name, only, part)
    except (pa.ArrowInvalid, InputError):
        return None, lines
    return (None if part.table is False else part), lines


def _arrow_block(batch: pa.RecordBatch, lines: np.ndarray, spec: LogSpec, name: str,
                 only: frozenset[str] | None, part: StatementPart) -> pa.Table | None | bool:
    """One Arrow block -> the same table as ``_block_table``; False sends the file to the exact path."""
    actor, verb, target, result = (batch.column(key) for key in ("actor", "verb", "object", "result"))
    names = _field(actor, "account", "name")
    home = pc.coalesce(_field(actor, "account", "homePage"), "")
    if names.null_count:  # not every actor an account: the other identifiers, no homePage
        named = names.is_valid()
        learner = pc.if_else(named, names, pc.coalesce(_field(actor, "mbox"), _field(actor, "mbox_sha1sum"),
                                                        _field(actor, "openid")))
        home = pc.if_else(named, home, pa.scalar(None, _TEXT))
    else:
        learner = names
    verb_ids = _field(verb, "id")
    if learner.null_count or verb_ids.null_count:
        return False
    voiding = pc.equal(verb_ids, VOIDED).to_numpy(zero_copy_only=False)
    if voiding.any():
        refs = batch.filter(pa.array(voiding)).column("object")
        is_ref = pc.fill_null(pc.equal(pc.struct_field(refs, "objectType"), "StatementRef"), False)
        part.voided.update(text.lower() for text in _field(refs, "id").filter(is_ref).to_pylist() if text)
    part.home_pages.update(page for page in pc.unique(home).to_pylist() if page is not None)
    part.rows_read += batch.num_rows
    keep = ~voiding
    if only is not None:
        wanted = pa.array(sorted(only), _TEXT)
        qualified = pc.binary_join_element_wise(home, learner, QUALIFIER)
        keep &= (pc.is_in(learner, wanted).to_numpy(zero_copy_only=False)
                 | pc.fill_null(pc.is_in(qualified, wanted), False).to_numpy(zero_copy_only=False))
    if not keep.all():
        mask = pa.array(keep)
        batch, lines = batch.filter(mask), lines[keep]
        learner, home, verb_ids = learner.filter(mask), home.filter(mask), verb_ids.filter(mask)
        target, result = batch.column("object"), batch.column("result")
    if batch.num_rows == 0:
        return None
    timestamp = _field(batch.column("timestamp"))
    part.used_stored += timestamp.null_count
    stamps = pc.coalesce(timestamp, _field(batch.column("stored")))
    time_ns, counts = parse_time_column(stamps.to_pandas(), "iso", spec.timezone, name, "timestamp", lines,
                                        row_word="line")
    part.counts = part.counts + counts
    success = pc.struct_field(result, "success").to_numpy(zero_copy_only=False)
    completion = pc.struct_field(result, "completion").to_numpy(zero_copy_only=False)
    outcome = np.where(success == True, 1, np.where(success == False, 2,  # noqa: E712 (None compares False)
                                                    np.where(completion == True, 3, 0))).astype(np.int8)  # noqa: E712
    return pa.table({
        "learner": learner.dictionary_encode(),
        "home": home.dictionary_encode(),
        "time_ns": pa.array(time_ns, pa.int64()),
        "action": verb_ids.dictionary_encode(),
        "outcome": pa.array(outcome),
        "item": pc.fill_null(_field(target, "id"), "").dictionary_encode(),
        "duration_s": pa.array(_durations(pc.struct_field(result, "duration"), name, lines), pa.float64()),
        "id": batch.column("id"),
        "row": pa.array(lines, pa.int64()),
    })


def read_xapi_log(spec: LogSpec, path: Path, only: frozenset[str] | None = None) -> StatementPart:
    """One file of xAPI statements -> a StatementPart; ``only`` keeps just those learners.

    ``only`` matches a learner's identifier and its ``homePage|name`` form, so it can be
    given before it is known whether the logs need qualified account names.  A plain
    JSON-lines file takes Arrow's path (blocks in threads); on the exact path a large
    one is split at line breaks into one stretch per core, read in parallel processes
    (msgspec's decoding holds Python's lock, so threads would not help there).
    """
    name = str(path)
    try:
        pieces = _read_with_arrow(spec, path, only) or _read_exactly(spec, path, only)
    except (msgspec.DecodeError, msgspec.ValidationError, ValueError, RecursionError) as error:
        # whatever the block reader could not place (trailing data, NaN, deep nesting, huge numbers): one line
        reason = "nested too deeply" if isinstance(error, RecursionError) else str(error).split(";")[0][:120]
        raise InputError(name, None, f"unreadable JSON ({reason}); a file holds one JSON array of statements or one "
                         "statement per line -- export the statements again") from None
    part = _merged(name, pieces)
    if part.statements_seen == 0:
        raise InputError(name, None, "holds no statements; export them again or remove its [[logs]] entry")
    if part.rows_read == 0:
        raise InputError(name, None, "holds no statement with an identified actor")
    if part.anonymous:
        part.warnings.append(f"{name}: {part.anonymous} statements left out: actor has no identifier (anonymous group)")
    if part.used_stored:
        part.warnings.append(f"{name}: {part.used_stored} statements have no timestamp; their stored time was used")
    return part


def _merged(name: str, pieces: list[StatementPart]) -> StatementPart:
    """One file's StatementPart from its blocks' or stretches' parts, in file order."""
    part = StatementPart(source=name, table=None)
    for piece in pieces:
        part.voided |= piece.voided
        part.home_pages |= piece.home_pages
        part.counts = part.counts + piece.counts
        for counter in ("rows_read", "used_stored", "statements_seen", "anonymous"):
            setattr(part, counter, getattr(part, counter) + getattr(piece, counter))
    tables = [piece.table for piece in pieces if piece.table is not None]
    part.table = pa.concat_tables(tables) if tables else None
    return part


def _read_exactly(spec: LogSpec, path: Path, only: frozenset[str] | None) -> list[StatementPart]:
    """The exact path: msgspec block by block, in parallel stretches for a large file."""
    stretches = parallel_stretches(path, spec.encoding)
    if len(stretches) > 1:
        with ProcessPoolExecutor(len(stretches), mp_context=multiprocessing.get_context("fork")) as pool:
            pieces = list(pool.map(_read_stretch, repeat(spec), repeat(path), repeat(only), stretches))
    else:
        pieces = [_read_stretch(spec, path, only, None)]
    return pieces


def _read_stretch(spec: LogSpec, path: Path, only: frozenset[str] | None,
                  stretch: tuple[int, int] | None) -> StatementPart:
    """The statements of the whole file, or of the bytes [start, end) of a JSON-lines file."""
    name = str(path)
    part = StatementPart(source=name, table=None)
    tables = []
    collecting = gc.isenabled()
    gc.disable()  # millions of short-lived, acyclic objects: collection passes would only cost time
    try:
        for statements, lines in StatementBlocks(path, spec.encoding, Statement, stretch=stretch):
            part.statements_seen += len(statements)
            before = part.rows_read
            table = _block_table(statements, lines, spec, name, only, part)
            part.anonymous += len(statements) - (part.rows_read - before)
            if table is not None:
                tables.append(table)
            del statements
    finally:
        if collecting:
            gc.enable()
    part.table = pa.concat_tables(tables) if tables else None
    return part


_HEX_DIGIT = np.zeros(256, dtype=bool)
_HEX_DIGIT[np.frombuffer(b"0123456789abcdefABCDEF", np.uint8)] = True
_UUID_LENGTH = 36
_UUID_DASHES = [8, 13, 18, 23]
_MIX = np.uint64(0x9E3779B97F4A7C15)  # an odd 64-bit constant (the golden ratio's bits) to mix a key's words


def _uuid_keys(ids: pa.StringArray) -> np.ndarray | None:
    """Ids in the form xAPI gives them (2.4.1: a UUID, 8-4-4-4-12 hex digits) as rows of
    nine 32-bit words, equal exactly when the ids are equal ignoring case (setting bit
    0x20 lower-cases A-F and leaves digits and "-" alone); None when any id has another
    form (then the caller compares the text)."""
    lengths = pc.min_max(pc.binary_length(ids))
    if len(ids) == 0 or lengths["min"].as_py() != _UUID_LENGTH or lengths["max"].as_py() != _UUID_LENGTH:
        return None
    start = np.frombuffer(ids.buffers()[1], np.int32)[ids.offset]
    text = np.frombuffer(ids.buffers()[2], np.uint8)[start:start + _UUID_LENGTH * len(ids)].reshape(-1, _UUID_LENGTH)
    dashes_in_place = (text[:, _UUID_DASHES] == ord("-")).all()
    if not dashes_in_place or np.count_nonzero(_HEX_DIGIT[text]) != (_UUID_LENGTH - len(_UUID_DASHES)) * len(ids):
        return None
    return (text | np.uint8(0x20)).view(np.uint32)


def _first_of_keys(keys: np.ndarray) -> np.ndarray | None:
    """True at the first row of each key (a row of words); None if two different keys
    mix to one number (then the caller compares the text)."""
    mixed = np.zeros(len(keys), dtype=np.uint64)
    for column in keys.T:
        mixed = mixed * _MIX ^ column
    first = np.ones(len(keys), dtype=bool)
    ordered = np.sort(mixed)
    if not (ordered[1:] == ordered[:-1]).any():  # the usual case: no id twice
        return first
    order = np.argsort(mixed, kind="stable")  # stable: equal keys stay in row order
    same = np.flatnonzero(mixed[order[1:]] == mixed[order[:-1]])
    earlier, later = order[same], order[same + 1]
    if (keys[earlier] != keys[later]).any():
        return None
    first[later] = False
    return first


def _repeats(ids: pa.ChunkedArray) -> np.ndarray:
    """True at each row whose statement id (ignoring case) an earlier row has; a row
    without an id repeats nothing.  UUIDs are compared as rows of numbers (sorting one
    number mixed from each costs a fraction of hashing the text), any other id as
    lower-cased text."""
    present = ids.is_valid().to_numpy(zero_copy_only=False)
    given = ids.filter(pa.array(present)).combine_chunks()
    keys = _uuid_keys(given)
    first = _first_of_keys(keys) if keys is not None else None
    if first is None:
        codes = pc.utf8_lower(given).dictionary_encode().indices.to_numpy(zero_copy_only=False)
        first = np.zeros(len(codes), dtype=bool)
        first[np.unique(codes, return_index=True)[1]] = True
    repeated = np.zeros(len(present), dtype=bool)
    repeated[np.flatnonzero(present)[~first]] = True
    return repeated


def resolve_statements(parts: list[StatementPart]) -> tuple[pd.DataFrame | None, list[str]]:
    """Apply the cross-file rules to every file's statements -> (EVENTS rows, warnings).

    A statement id seen again is counted once (the first file, first line); a statement
    some statement voids is dropped; account learners are qualified by homePage when
    the logs hold more than one.  Unsorted; ``combine_events`` sorts.
    """
    warnings: list[str] = []
    home_pages = set().union(*(part.home_pages for part in parts))
    tables = [(number, part.table) for number, part in enumerate(parts) if part.table is not None]
    if not tables:
        return None, warnings
    table = pa.concat_tables([t.append_column("file", pa.array(np.full(len(t), n, np.int32))) for n, t in tables])
    table = table.unify_dictionaries()
    learner = pc.cast(table["learner"], pa.string())
    if len(home_pages) > 1:
        qualified = pc.binary_join_element_wise(pc.cast(table["home"], pa.string()), learner, QUALIFIER)
        learner = pc.coalesce(qualified, learner)
        shown = ", ".join(sorted(home_pages)[:3])
        warnings.append(f"xAPI accounts come from {len(home_pages)} homePages ({shown}): account learners are "
                        f"written homePage{QUALIFIER}name; use that form in roster.csv's log_id")
    keep = ~_repeats(table["id"])
    duplicates = int((~keep).sum())
    voided = set().union(*(part.voided for part in parts))
    if voided:
        is_voided = pc.is_in(pc.utf8_lower(table["id"]), pa.array(sorted(voided), pa.string()))
        is_voided = pc.fill_null(is_voided, False).to_numpy(zero_copy_only=False)
        warnings.append(f"{int((is_voided & keep).sum())} voided statements dropped (xAPI 2.3.2)")
        keep &= ~is_voided
    if duplicates:
        warnings.append(f"{duplicates} statements appear more than once (same id); each was counted once")
    rows = np.flatnonzero(keep)
    if rows.size < len(table):
        table, learner = table.take(rows), learner.take(rows)
    file_codes = table["file"].to_numpy()
    events = build_events(
        learner=pd.Categorical(learner.dictionary_encode().to_pandas()) if len(learner) else [],
        time_ns=table["time_ns"].to_numpy(), action=table["action"].to_pandas(),
        outcome=pd.Categorical.from_codes(table["outcome"].to_numpy().astype(np.int8), OUTCOME_NAMES),
        item=table["item"].to_pandas(), skill=None, duration_s=table["duration_s"].to_numpy(),
        source="", source_row=table["row"].to_numpy())
    sources, inverse = np.unique([part.source for part in parts], return_inverse=True)
    events["source"] = pd.Categorical.from_codes(inverse[file_codes], sources)
    return events, warnings
