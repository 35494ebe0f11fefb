"""Blocks of whole learners from Parquet files sorted by learner, then time.

Window features and the coverage check need a learner's whole log at once but nothing
of another learner's, so a sorted file is read row group by row group: each block ends
where the last learner read so far begins, and that learner's rows travel on into the
next block.  Memory: one row group and the learner carried over (a learner whose events
span several row groups is carried until their last row).  The order is checked as the
blocks go (learners strictly increasing, each in one run): a file out of order is
refused rather than cut through a learner.  Files that share learners (a log cut by day)
are merged: one block of every file at a time, each learner's rows of all files in one
block, in the order one sort of all the files' rows would give.
"""
from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from sync.event_table import order_by_learner_and_time

LEARNER, TIME = "learner", "time_ns"


@dataclass(frozen=True)
class LearnerBlocks:
    """Sorted Parquet files read as blocks of whole learners; ``rows`` events in all (also
    ``len()``) of ``learners``.  ``shared``: some learner has rows in more than one file."""

    paths: tuple[Path, ...]
    rows: int
    learners: frozenset[str]
    shared: bool = False

    def __len__(self) -> int:
        return self.rows

    def blocks(self, columns: Sequence[str] | None = None) -> Iterator[pa.Table]:
        """``columns`` (learner among them, and time_ns when files share learners; None: all)
        of every file, block by block."""
        if self.shared:
            yield from merged_learner_blocks([parquet_learner_blocks(path, columns) for path in self.paths])
            return
        for path in self.paths:
            yield from parquet_learner_blocks(path, columns)


def merged_learner_blocks(sources: Sequence[Iterable[pa.Table]]) -> Iterator[pa.Table]:
    """Blocks of whole learners drawn from several sources of such blocks (each sorted by
    learner, then time) that may share learners: a learner's rows from every source in one
    block, sorted by learner, then time, ties in source order (as one stable sort of all the
    sources' rows, in order, leaves them).  Holds one block of every source at a time.

    Every source's rows up to the smallest last learner among the held blocks are all held
    (a source's block holds its learners whole), so those rows make the next block.
    """
    iterators = [iter(source) for source in sources]
    held = [_with_runs(next(iterator, None)) for iterator in iterators]  # (block, run starts, run learners)
    while any(item is not None for item in held):
        live = [number for number, item in enumerate(held) if item is not None]
        last = min(held[number][2][-1] for number in live)
        pieces = []
        for number in live:
            table, starts, learners = held[number]
            after = int(np.searchsorted(learners, last, side="right"))
            cut = table.num_rows if after == len(starts) else int(starts[after])
            if cut:
                pieces.append(table.slice(0, cut))
            held[number] = (_with_runs(next(iterators[number], None)) if cut == table.num_rows
                            else (table.slice(cut), starts[after:] - cut, learners[after:]))
        yield _in_learner_time_order(pa.concat_tables(pieces).unify_dictionaries().combine_chunks())


def _with_runs(table: pa.Table | None) -> tuple[pa.Table, np.ndarray, np.ndarray] | None:
    """A block (dictionary indices widened, so blocks of any file can be joined) with its
    learner runs (found once, then cut along with the block)."""
    return None if table is None else (_with_int32_indices(table), *learner_runs(table.column(LEARNER)))


def _with_int32_indices(table: pa.Table) -> pa.Table:
    """Dictionary columns with 32-bit indices: files written from pandas carry 8- or 16-bit
    ones as their own word counts need (a day with 200 learners, another with 40), and
    tables of different index widths cannot be joined."""
    fields = [pa.field(field.name, pa.dictionary(pa.int32(), field.type.value_type))
              if pa.types.is_dictionary(field.type) else field for field in table.schema]
    return table.cast(pa.schema(fields))


def _in_learner_time_order(table: pa.Table) -> pa.Table:
    """The table sorted as EVENTS is (sync.event_table: learner as text, then time, stable)."""
    if TIME not in table.column_names:
        raise ValueError(f"merging files that share learners needs the {TIME!r} column")
    learner = table.column(LEARNER)
    if not pa.types.is_dictionary(learner.type):
        learner = pc.dictionary_encode(learner)
    order = order_by_learner_and_time(learner.to_pandas(), table.column(TIME).to_numpy())
    return table if order is None else table.take(pa.array(order))


def parquet_learner_blocks(path: Path, columns: Sequence[str] | None = None) -> Iterator[pa.Table]:
    """Tables of whole learners (``columns``, None for all; text columns as dictionaries) from a
    Parquet file sorted by learner then time; no empty tables.  Raises ValueError when the
    learners are out of order."""
    schema = pq.read_schema(path)
    columns = list(schema.names if columns is None else columns)
    if LEARNER not in columns:
        raise ValueError(f"the columns must include {LEARNER!r}")
    text = [name for name in columns if pa.types.is_string(schema.field(name).type)
            or pa.types.is_large_string(schema.field(name).type)]
    parquet = pq.ParquetFile(path, read_dictionary=text)
    carried, previous = None, None
    for group in range(parquet.num_row_groups):
        table = parquet.read_row_group(group, columns=columns)
        if carried is not None:
            table = pa.concat_tables([carried, table])
        starts, learners = learner_runs(table.column(LEARNER))
        if len(learners) and ((previous is not None and not learners[0] > previous)
                              or not (learners[1:] > learners[:-1]).all()):
            raise ValueError(f"{path} is not sorted by learner: a learner's rows are not together")
        cut = int(starts[-1]) if len(starts) else 0
        if cut:
            previous = learners[-2]
            yield table.slice(0, cut)
        # A copy of the last learner's rows: a slice would keep the whole row group alive.
        # (Taken from the slice: a take on the whole table first joins all its chunks.)
        tail = table.slice(cut)
        carried = tail.take(pa.array(np.arange(tail.num_rows)))
        del table
    if carried is not None and carried.num_rows:
        yield carried


def learner_runs(column: pa.ChunkedArray) -> tuple[np.ndarray, np.ndarray]:
    """(first row of every run of equal learners, the run's learner as text), for a column of
    text or dictionary chunks; decided on the dictionaries' codes, not row by row in Python."""
    starts, learners, offset = [], [], 0
    for chunk in column.chunks:
        if not pa.types.is_dictionary(chunk.type):
            chunk = pc.dictionary_encode(chunk)
        codes = (pc.fill_null(chunk.indices, -1) if chunk.null_count else chunk.indices).to_numpy(zero_copy_only=False)
        names = np.append(chunk.dictionary.to_numpy(zero_copy_only=False).astype(object), "")
        if len(codes):
            local = np.append(0, np.flatnonzero(codes[1:] != codes[:-1]) + 1)
            starts.append(local + offset)
            learners.append(names[codes[local]])
        offset += len(chunk)
    if not starts:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=object)
    starts, learners = np.concatenate(starts), np.concatenate(learners)
    new = np.append(True, learners[1:] != learners[:-1])  # a run may go on across chunks
    return starts[new], learners[new]
