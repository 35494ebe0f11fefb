"""Blocks of whole learners from Parquet files sorted by learner, then time.

Window features and the coverage check need a learner's whole log at once but nothing
of another learner's, so a sorted file is read row group by row group: each block ends
where the last learner read so far begins, and that learner's rows travel on into the
next block.  Memory: one row group and the learner carried over (a learner whose events
span several row groups is carried until their last row).  The order is checked as the
blocks go (learners strictly increasing, each in one run): a file out of order is
refused rather than cut through a learner.
"""
from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

LEARNER = "learner"


@dataclass(frozen=True)
class LearnerBlocks:
    """Sorted Parquet files no two of which hold the same learner, read as blocks of whole
    learners; ``rows`` events in all (also ``len()``) of ``learners``."""

    paths: tuple[Path, ...]
    rows: int
    learners: frozenset[str]

    def __len__(self) -> int:
        return self.rows

    def blocks(self, columns: Sequence[str] | None = None) -> Iterator[pa.Table]:
        """``columns`` (learner among them; None: all) of every file, block by block."""
        for path in self.paths:
            yield from parquet_learner_blocks(path, columns)


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
