"""How a file of JSON statements is cut into blocks of whole statements, each with the line
it starts on, so that memory is bounded by the block size rather than by the file.

Three layouts, told apart by the first bytes (a UTF-8 byte order mark is skipped):
  JSON lines   one value per line (blank lines allowed); a line may also hold a whole
               page of results ``{"statements": [...], "more": ...}``;
  JSON array   ``[ {...}, {...} ]`` in any layout: top-level objects are found by a
               vectorised scan of the structural characters outside strings;
  one document a single pretty-printed object (a page of results, or one statement),
               read whole: a page is bounded by the server's page size.
Gzip files (by their magic bytes) are read through ``gzip``; any other encoding than
UTF-8 is transcoded block by block.  Decoding is msgspec's (compiled) into the caller's
typed structure; when a block fails, the slow exact path (the standard library's
decoder, statement by statement) finds the line and column to report.
"""
from __future__ import annotations

import codecs
import gzip
import io
import json
import mmap
import os
import re
from collections.abc import Callable, Iterator
from itertools import chain
from pathlib import Path

import msgspec
import numpy as np

from sync.errors import InputError

BLOCK_BYTES = 8 * 1024 * 1024
PARALLEL_MIN_BYTES = 64 * 1024 * 1024  # below this, starting processes costs more than it saves
_BOM = b"\xef\xbb\xbf"
_WHITESPACE = b" \t\r\n"
_DELTA = np.zeros(256, dtype=np.int8)
_DELTA[[ord("["), ord("{")]] = 1
_DELTA[[ord("]"), ord("}")]] = -1
_BYTE_POSITION = re.compile(r"\(byte (\d+)\)")


def _open(path: Path, encoding: str) -> io.RawIOBase:
    """A binary stream of the file's text as UTF-8 (gunzipped, transcoded when needed)."""
    with open(path, "rb") as handle:
        gzipped = handle.read(2) == b"\x1f\x8b"
    stream = gzip.GzipFile(path) if gzipped else open(path, "rb")  # GzipFile closes only a file it opened
    if codecs.lookup(encoding).name == "utf-8":
        return stream
    return _Transcoded(io.TextIOWrapper(stream, encoding=encoding, newline=""))


def plain_json_lines(path: Path, encoding: str) -> bool:
    """Is the file uncompressed UTF-8 JSON lines (its first line one whole object)?"""
    if codecs.lookup(encoding).name != "utf-8":
        return False
    with open(path, "rb") as handle:
        head = handle.read(64 * 1024)
    body = head[len(_BOM):] if head.startswith(_BOM) else head
    if head[:2] == b"\x1f\x8b" or not body.startswith(b"{"):
        return False
    try:
        msgspec.json.decode(body.split(b"\n", 1)[0])
    except msgspec.DecodeError:
        return False  # a pretty-printed document, not JSON lines
    return True


def whole_lines(read: Callable[[], bytes], buffer: bytes = b"") -> Iterator[bytes]:
    """Blocks of whole lines (each ends with a line break, except perhaps the file's last):
    ``buffer`` first, then what ``read()`` gives until it gives nothing.  Each block is
    copied once (the partial line carried over, then the read up to its last break)."""
    rest = b""
    for more in chain((buffer,), iter(read, b"")):
        cut = more.rfind(b"\n") + 1
        if cut == 0:
            rest += more
            continue
        yield b"".join((rest, memoryview(more)[:cut]))
        rest = more[cut:]
    if rest:
        yield rest


def plain_line_blocks(path: Path) -> Iterator[memoryview]:
    """Blocks of whole lines of a plain UTF-8 file (see ``plain_json_lines``), byte order
    mark dropped.  The file is mapped, not read: no copy is made, and a block's memory
    goes back to the system as soon as its last user lets it go."""
    block_bytes = BLOCK_BYTES  # read here, not bound at import: tests make blocks small
    size = path.stat().st_size
    with open(path, "rb") as handle:
        start = len(_BOM) if handle.read(len(_BOM)) == _BOM else 0
        length = block_bytes
        while start < size:
            base = start - start % mmap.ALLOCATIONGRANULARITY
            end = min(start + length, size)
            mapped = mmap.mmap(handle.fileno(), end - base, access=mmap.ACCESS_READ, offset=base)
            cut = end if end == size else base + mapped.rfind(b"\n", start - base) + 1
            if cut <= start:  # no line break yet: a line longer than a block
                length *= 2
                continue
            yield memoryview(mapped)[start - base:cut - base]
            start, length = cut, block_bytes


def parallel_stretches(path: Path, encoding: str, parts: int | None = None) -> list[tuple[int, int]]:
    """Byte stretches [start, end) of a large plain UTF-8 JSON-lines file, cut just after
    line breaks, one per core; a single stretch (or none) when splitting does not apply."""
    parts = parts or os.cpu_count() or 1
    size = path.stat().st_size
    if parts < 2 or size < PARALLEL_MIN_BYTES or not plain_json_lines(path, encoding):
        return []
    with open(path, "rb") as handle:
        cuts = [0]
        for number in range(1, parts):
            handle.seek(size * number // parts)
            handle.readline()
            cuts.append(max(handle.tell(), cuts[-1]))
    cuts.append(size)
    return [(start, end) for start, end in zip(cuts[:-1], cuts[1:]) if end > start]


class _Range:
    """The bytes [start, end) of a file, read as a stream."""

    def __init__(self, raw, start: int, end: int) -> None:
        self.raw, self.left = raw, end - start
        raw.seek(start)

    def read(self, size: int) -> bytes:
        data = self.raw.read(min(size, self.left))
        self.left -= len(data)
        return data

    def close(self) -> None:
        self.raw.close()


class _Transcoded:
    """Reads a text stream in another encoding as UTF-8 bytes."""

    def __init__(self, text: io.TextIOWrapper) -> None:
        self.text = text

    def read(self, size: int) -> bytes:
        return self.text.read(size).encode("utf-8")

    def close(self) -> None:
        self.text.close()


class StatementBlocks:
    """Iterate ``(statements, lines)`` blocks of one file.

    ``single`` decodes one statement or page (a msgspec Struct with an optional
    ``statements`` list for pages), ``many`` a JSON array of them.  Pages are flattened:
    each statement of a page gets the line the statement starts on when the page spans
    lines, else the page's line.
    """

    def __init__(self, path: Path, encoding: str, single: type, block_bytes: int = BLOCK_BYTES,
                 stretch: tuple[int, int] | None = None) -> None:
        self.path, self.name, self.encoding, self.stretch = path, str(path), encoding, stretch
        self.single = msgspec.json.Decoder(single)
        self.many = msgspec.json.Decoder(list[single])
        self.block_bytes = block_bytes

    def __iter__(self) -> Iterator[tuple[list, np.ndarray]]:
        if self.stretch is not None:  # a stretch of a JSON-lines file (see parallel_stretches)
            yield from self._stretch(*self.stretch)
            return
        stream = _open(self.path, self.encoding)
        try:
            head = self._read(stream, self.block_bytes)
            if head.startswith(_BOM):
                head = head[len(_BOM):]
            stripped = head.lstrip(_WHITESPACE)
            if not stripped:
                raise InputError(self.name, None, "is empty; export the statements again or remove its [[logs]] entry")
            if stripped.startswith(b"["):
                yield from self._array(stream, head)
            elif stripped.startswith(b"{") and not self._first_line_is_whole(head):
                yield from self._document(stream, head)
            else:
                yield from self._lines(stream, head)
        finally:
            stream.close()

    def _read(self, stream, size: int) -> bytes:
        try:
            return stream.read(size)
        except UnicodeDecodeError as error:
            raise InputError(self.name, f"byte {error.start}", f"is not valid {self.encoding} text; "
                             "set encoding = \"...\" in its [[logs]] entry") from None
        except (OSError, EOFError) as error:
            raise InputError(self.name, None, f"cannot be read ({error}); export it again") from None

    def _first_line_is_whole(self, head: bytes) -> bool:
        """Does the first non-blank line hold a whole JSON value (so the file is JSON lines)?"""
        for line in head.split(b"\n"):
            if line.strip():
                try:
                    msgspec.json.decode(line)
                    return True
                except msgspec.DecodeError:
                    return False
        return True

    # --- JSON lines -------------------------------------------------------------------
    def _stretch(self, start: int, end: int) -> Iterator[tuple[list, np.ndarray]]:
        lines_before = 0
        with open(self.path, "rb") as handle:  # line numbers count from the file's start
            while handle.tell() < start:
                lines_before += handle.read(min(self.block_bytes, start - handle.tell())).count(b"\n")
        stream = _Range(open(self.path, "rb"), start, end)
        try:
            head = self._read(stream, self.block_bytes)
            if start == 0 and head.startswith(_BOM):
                head = head[len(_BOM):]
            yield from self._lines(stream, head, lines_before)
        finally:
            stream.close()

    def _lines(self, stream, buffer: bytes, lines_before: int = 0) -> Iterator[tuple[list, np.ndarray]]:
        for chunk in whole_lines(lambda: self._read(stream, self.block_bytes), buffer):
            yield self._decode_lines(chunk, lines_before)
            lines_before += chunk.count(b"\n")

    def _decode_lines(self, chunk: bytes, lines_before: int) -> tuple[list, np.ndarray]:
        try:
            values = self.single.decode_lines(chunk)
        except (msgspec.DecodeError, msgspec.ValidationError):
            self._locate_line_error(chunk, lines_before)
            raise
        codes = np.frombuffer(chunk, dtype=np.uint8)
        starts = np.concatenate(([0], np.flatnonzero(codes == 10) + 1))
        starts = starts[starts < len(chunk)]
        if len(values) == len(starts):
            numbers = lines_before + 1 + np.arange(len(starts), dtype=np.int64)
        else:  # blank lines: keep the numbers of lines with anything but whitespace
            filled = np.add.reduceat(codes > 32, starts, dtype=np.int64) > 0
            numbers = lines_before + 1 + np.flatnonzero(filled).astype(np.int64)
        return self._flatten(values, numbers) if b'"statements"' in chunk else (values, numbers)

    def _locate_line_error(self, chunk: bytes, lines_before: int) -> None:
        """Raise the InputError for the first bad line of a block that failed to decode."""
        for offset, line in enumerate(chunk.split(b"\n"), start=1):
            if not line.strip():
                continue
            number = lines_before + offset
            try:
                line.decode("utf-8")
            except UnicodeDecodeError as error:
                raise InputError(self.name, f"line {number} column {error.start + 1}",
                                 "is not valid UTF-8 text; set encoding = \"...\" in its [[logs]] entry") from None
            try:
                self.single.decode(line)
            except msgspec.ValidationError as error:
                raise InputError(self.name, f"line {number}", _invalid(str(error))) from None
            except msgspec.DecodeError as error:
                column = _byte_position(str(error), len(line)) + 1
                raise InputError(self.name, f"line {number} column {column}",
                                 f"malformed JSON ({_reason(error)}); each line must hold one whole statement") from None

    # --- one document ------------------------------------------------------------------
    def _document(self, stream, buffer: bytes) -> Iterator[tuple[list, np.ndarray]]:
        while True:
            more = self._read(stream, self.block_bytes)
            if not more:
                break
            buffer += more
        try:
            value = self.single.decode(buffer)
        except (msgspec.DecodeError, msgspec.ValidationError):
            self._locate_exact(buffer.decode("utf-8", errors="replace"), 0, whole=True)
            raise
        number = buffer[: len(buffer) - len(buffer.lstrip(_BOM + _WHITESPACE))].count(b"\n") + 1
        if getattr(value, "statements", None) is None:
            yield [value], np.array([number], dtype=np.int64)
            return
        opens, _ = _object_spans(buffer, base_depth=0, depth=3)
        lines = _line_numbers(buffer, opens, 0)
        if len(lines) != len(value.statements):
            lines = np.full(len(value.statements), number, dtype=np.int64)
        yield list(value.statements), lines

    # --- JSON array --------------------------------------------------------------------
    def _array(self, stream, buffer: bytes) -> Iterator[tuple[list, np.ndarray]]:
        start = buffer.index(b"[") + 1
        lines_before = buffer[:start].count(b"\n")
        buffer = buffer[start:]
        at_end = False
        while True:
            opens, closes = _object_spans(buffer, base_depth=1, depth=2)
            if len(closes):
                last = closes[-1] + 1
                chunk = buffer[:last]
                yield self._decode_array(chunk, opens[: len(closes)], lines_before)
                lines_before += chunk.count(b"\n")
                buffer = buffer[last:]
            elif at_end:
                break
            else:
                more = self._read(stream, max(self.block_bytes, len(buffer)))
                at_end = not more
                buffer += more
        if buffer.strip(_WHITESPACE + b",") != b"]" and not buffer.strip(_WHITESPACE + b",").startswith(b"]"):
            self._locate_exact("[" + buffer.decode("utf-8", errors="replace"), lines_before, whole=False)
            raise InputError(self.name, f"line {lines_before + 1}", "the JSON array is not closed with ]; "
                             "export the statements again")
        if buffer.strip(_WHITESPACE + b",")[1:].strip(_WHITESPACE):
            raise InputError(self.name, f"line {lines_before + 1}", "data after the end of the JSON array; a file "
                             "holds one array of statements (or one statement per line): remove the rest")

    def _decode_array(self, chunk: bytes, opens: np.ndarray, lines_before: int) -> tuple[list, np.ndarray]:
        try:
            values = self.many.decode(b"[" + chunk.lstrip(_WHITESPACE + b",") + b"]")
        except (msgspec.DecodeError, msgspec.ValidationError):
            self._locate_exact("[" + chunk.decode("utf-8", errors="replace") + "]", lines_before, whole=False)
            raise
        if len(values) != len(opens):  # something other than objects between them
            self._locate_exact("[" + chunk.decode("utf-8", errors="replace") + "]", lines_before, whole=False)
        return self._flatten(values, _line_numbers(chunk, opens, lines_before))

    # --- the exact slow path -------------------------------------------------------------
    def _locate_exact(self, text: str, lines_before: int, whole: bool) -> None:
        """Raise the InputError for the first problem in ``text`` (an array, or a whole
        document), with the line and column of a JSON error, or the line a statement that
        is not an object or has a field of the wrong type starts on."""
        decoder = json.JSONDecoder()
        shift = lines_before
        try:
            if whole:
                value = decoder.raw_decode(text.lstrip(" \t\r\n\ufeff"))[0]
                self.single.decode(json.dumps(value).encode())
                return
            position = 1
            while True:
                position = re.compile(r"[\s,]*").match(text, position).end()
                if position >= len(text) or text[position] == "]":
                    return
                element, end = decoder.raw_decode(text, position)
                number = shift + text.count("\n", 0, position) + 1
                if not isinstance(element, dict):
                    raise InputError(self.name, f"line {number}", "is not a statement (a JSON object); fix or remove it")
                try:
                    self.single.decode(json.dumps(element).encode())
                except msgspec.ValidationError as error:
                    raise InputError(self.name, f"line {number}", _invalid(str(error))) from None
                position = end
        except json.JSONDecodeError as error:
            raise InputError(self.name, f"line {shift + error.lineno} column {error.colno}",
                             f"malformed JSON ({error.msg}); fix the statement there") from None
        except msgspec.ValidationError as error:
            raise InputError(self.name, f"line {shift + 1}", _invalid(str(error))) from None

    @staticmethod
    def _flatten(values: list, numbers: np.ndarray) -> tuple[list, np.ndarray]:
        """Statements of pages spread out (each takes its page's line)."""
        if not any(getattr(value, "statements", None) is not None for value in values):
            return values, numbers
        statements, lines = [], []
        for value, number in zip(values, numbers.tolist()):
            inner = getattr(value, "statements", None)
            if inner is None:
                statements.append(value)
                lines.append(number)
            else:
                statements.extend(inner)
                lines.extend([number] * len(inner))
        return statements, np.asarray(lines, dtype=np.int64)


def _object_spans(data: bytes, base_depth: int, depth: int) -> tuple[np.ndarray, np.ndarray]:
    """Byte positions where objects at nesting ``depth`` open and close in ``data``.

    ``data`` starts outside any string at nesting ``base_depth``.  Quotes preceded by an
    odd run of backslashes are escaped; brackets inside strings do not count.
    """
    codes = np.frombuffer(data, dtype=np.uint8)
    quotes = np.flatnonzero(codes == 34)
    backslashes = np.flatnonzero(codes == 92)
    if backslashes.size and quotes.size:
        new_run = np.ones(backslashes.size, dtype=bool)
        new_run[1:] = np.diff(backslashes) != 1
        run_start = np.maximum.accumulate(np.where(new_run, backslashes, 0))
        after = quotes[(quotes > 0) & (codes[np.maximum(quotes - 1, 0)] == 92)]
        length = after - run_start[np.searchsorted(backslashes, after - 1)]
        quotes = np.setdiff1d(quotes, after[length % 2 == 1], assume_unique=True)
    positions = np.flatnonzero(_DELTA[codes])
    if quotes.size:
        positions = positions[(np.searchsorted(quotes, positions) & 1) == 0]
    steps = _DELTA[codes[positions]]
    level = base_depth + np.cumsum(steps, dtype=np.int64)
    braces = codes[positions]
    opens = positions[(steps == 1) & (level == depth) & (braces == 123)]
    closes = positions[(steps == -1) & (level == depth - 1) & (braces == 125)]
    return opens, closes[: len(opens)]


def _line_numbers(data: bytes, positions: np.ndarray, lines_before: int) -> np.ndarray:
    """1-based line of each byte position of ``data``."""
    newlines = np.flatnonzero(np.frombuffer(data, dtype=np.uint8) == 10)
    return lines_before + 1 + np.searchsorted(newlines, positions).astype(np.int64)


def _byte_position(message: str, default: int) -> int:
    match = _BYTE_POSITION.search(message)
    return int(match.group(1)) if match else default


def _reason(error: Exception) -> str:
    return _BYTE_POSITION.sub("", str(error)).replace("JSON is malformed: ", "").strip()


def _invalid(message: str) -> str:
    """msgspec's "Expected `str`, got `int` - at `$.verb.id`" -> the user's words."""
    what, _, where = message.partition(" - at `")
    where = where.rstrip("`").lstrip("$").lstrip(".")
    where = re.sub(r"^\[\d+\]\.?", "", where)
    if not where:
        return "is not a statement (a JSON object); fix or remove it"
    return f"{where}: {what.replace('`', '')} (xAPI 1.0.3 Part Two 2.4); fix the statement there"
