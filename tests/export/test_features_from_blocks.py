"""Window features from a stream of learner blocks (a sorted Parquet file read row group by
row group) are bit-identical to one pass over the whole log in memory."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from export.features import compute_features, compute_features_from_blocks
from sync.sorted_parquet import parquet_learner_blocks
from tests.export.test_features_against_duckdb import random_log
from tests.export.test_features_in_blocks import ONE_BLOCK, assert_bit_identical, rare_actions

COLUMNS = ["learner", "time_ns", "action", "outcome", "item", "skill"]


def sorted_log(seed: int, path, row_group_rows: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """A random log (fifteen actions, some only in one learner's rows) written to ``path``
    sorted by learner then time, in row groups of ``row_group_rows``; and its windows."""
    events, windows = random_log(seed, learners=14, events=4000, windows=500)
    events = rare_actions(events)
    ordered = events.sort_values(["learner", "time_ns"], kind="stable")
    pq.write_table(pa.Table.from_pandas(ordered, preserve_index=False), path, row_group_size=row_group_rows)
    return events, windows


def learners_of(block: pa.Table) -> set[str]:
    return set(block.column("learner").to_pylist())


@pytest.mark.parametrize("row_group_rows", [7, 97, 1000, 100_000])
def test_features_streamed_from_a_sorted_parquet_match_one_pass(tmp_path, row_group_rows: int) -> None:
    path = tmp_path / "log.parquet"
    events, windows = sorted_log(5, path, row_group_rows)
    whole = compute_features(events, windows, block_rows=ONE_BLOCK)
    blocks = list(parquet_learner_blocks(path, COLUMNS))
    assert sum(block.num_rows for block in blocks) == len(events)
    seen = [learners_of(block) for block in blocks]
    assert sum(map(len, seen)) == len(set().union(*seen)) == events["learner"].nunique()  # each learner in one block
    if row_group_rows < 1000:  # learners' rows span several row groups, and row groups end inside learners
        per_learner = events["learner"].value_counts()
        assert per_learner.min() > 2 * row_group_rows  # so every learner spans three row groups or more
        assert len(blocks) == events["learner"].nunique()
    streamed = compute_features_from_blocks(iter(blocks), windows)
    assert_bit_identical(streamed, whole)
    assert len([column for column in whole.columns if column.startswith("action_")]) == 10
    # The generator, not a list: one block at a time is what the export does.
    assert_bit_identical(compute_features_from_blocks(parquet_learner_blocks(path, COLUMNS), windows), whole)


def test_empty_blocks_and_record_batches_in_the_stream_change_nothing(tmp_path) -> None:
    path = tmp_path / "log.parquet"
    events, windows = sorted_log(6, path, 250)
    windows.loc[::11, "log_id"] = None  # windows without a log id among the others
    whole = compute_features(events, windows, block_rows=ONE_BLOCK)
    blocks = list(parquet_learner_blocks(path, COLUMNS))
    empty = blocks[0].slice(0, 0)
    mixed = [empty, blocks[0], empty, *[block.combine_chunks().to_batches()[0] for block in blocks[1:]], empty]
    assert_bit_identical(compute_features_from_blocks(mixed, windows), whole)


def test_windows_no_block_holds_and_no_windows_at_all_match_one_pass(tmp_path) -> None:
    path = tmp_path / "log.parquet"
    events, windows = sorted_log(7, path, 300)
    unknown = windows.assign(log_id="n-999")  # a learner without events: computed on an empty block
    unknown.loc[::3, "log_id"] = None  # and windows without a log id
    assert_bit_identical(compute_features_from_blocks(parquet_learner_blocks(path, COLUMNS), unknown),
                         compute_features(events, unknown, block_rows=ONE_BLOCK))
    assert_bit_identical(compute_features_from_blocks([], unknown), compute_features(events, unknown))
    none = windows.iloc[:0]
    streamed = compute_features_from_blocks(parquet_learner_blocks(path, COLUMNS), none)
    assert_bit_identical(streamed, compute_features(events, none))
    assert len(streamed) == 0 and "event_count" in streamed.columns


def test_a_learner_in_two_blocks_is_refused(tmp_path) -> None:
    events, windows = random_log(8, learners=4, events=400, windows=40)
    table = pa.Table.from_pandas(events.sort_values(["learner", "time_ns"]), preserve_index=False)
    first = table.column("learner").to_pylist().index("n-001")
    with pytest.raises(ValueError, match="n-001"):
        compute_features_from_blocks([table.slice(0, first + 3), table.slice(first + 3)], windows)


def test_a_file_out_of_learner_order_is_refused(tmp_path) -> None:
    events, _ = random_log(9, learners=5, events=500, windows=10)  # rows shuffled
    path = tmp_path / "unsorted.parquet"
    pq.write_table(pa.Table.from_pandas(events, preserve_index=False), path, row_group_size=100)
    with pytest.raises(ValueError, match="not sorted by learner"):
        list(parquet_learner_blocks(path, COLUMNS))
