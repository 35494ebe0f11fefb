"""Sorted files that share learners (a log cut by day), read as merged blocks of whole
learners: all blocks together are the rows of every file in the order of pandas' stable
multi-key sort (pandas.DataFrame.sort_values, a reference library), and no learner is cut
between two blocks, whatever the row-group sizes."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from sync.sorted_parquet import LearnerBlocks

SECOND = 1_000_000_000


def _sorted_file(path, rng: np.random.Generator, names: list[str], day: int, rows: int, row_group: int) -> pd.DataFrame:
    learner = rng.choice(names, rows)
    time_ns = 1_780_000_000 * SECOND + day * 86_400 * SECOND + rng.integers(0, 60, rows) * SECOND  # many ties
    frame = pd.DataFrame({"learner": learner, "time_ns": time_ns, "source_row": np.arange(1, rows + 1),
                          "source": f"day-{day}"})
    frame = frame.sort_values(["learner", "time_ns"], kind="stable").reset_index(drop=True)
    table = pa.Table.from_pandas(frame.astype({"learner": "category", "source": "category"}), preserve_index=False)
    pq.write_table(table, path, row_group_size=row_group)
    return frame


@pytest.mark.parametrize("row_group", [7, 97, 1000])
def test_merged_blocks_hold_whole_learners_in_one_stable_sort_order(tmp_path, row_group: int) -> None:
    rng = np.random.default_rng(row_group)
    names = [f"n-{number:04d}" for number in (3, 10, 200, 1, 55, 7)]
    days = [(0, names), (1, names[:4]), (2, names[2:]), (3, names[5:])]  # shared by some files, not all
    frames, paths = [], []
    for day, present in days:
        paths.append(tmp_path / f"day-{day}.parquet")
        frames.append(_sorted_file(paths[-1], rng, present, day, 400, row_group))
    blocks = list(LearnerBlocks(paths=tuple(paths), rows=1600, learners=frozenset(names), shared=True).blocks())
    seen: list[str] = []
    for block in blocks:
        learners = pd.unique(block.column("learner").to_pandas().astype(str))
        assert not set(learners) & set(seen)  # a learner never comes back in a later block
        seen.extend(learners)
    merged = pa.concat_tables(blocks, promote_options="permissive").to_pandas()
    reference = pd.concat(frames, ignore_index=True).sort_values(["learner", "time_ns"], kind="stable")
    assert merged["learner"].astype(str).tolist() == reference["learner"].tolist()
    assert merged["time_ns"].tolist() == reference["time_ns"].tolist()
    assert list(zip(merged["source"].astype(str), merged["source_row"])) == \
        list(zip(reference["source"], reference["source_row"]))
    assert len(blocks) > 1  # the merge did cut (at the smallest last learner held)


def test_merged_files_need_the_time_column(tmp_path) -> None:
    rng = np.random.default_rng(1)
    paths = []
    for day in range(2):
        paths.append(tmp_path / f"day-{day}.parquet")
        _sorted_file(paths[-1], rng, ["n-1", "n-2"], day, 20, 10)
    with pytest.raises(ValueError, match="time_ns"):
        list(LearnerBlocks(paths=tuple(paths), rows=40, learners=frozenset({"n-1", "n-2"}), shared=True)
             .blocks(["learner", "source"]))


def test_files_whose_words_need_wider_indices_merge(tmp_path) -> None:
    """pandas writes a column's dictionary indices as narrow as its word count allows (8 bits
    up to 127 words, then 16): a day with 200 items beside a day with 12 must still merge."""
    rng = np.random.default_rng(5)
    frames, paths = [], []
    for day, (learners, items) in enumerate(((150, 200), (5, 12))):
        names = [f"n-{number:04d}" for number in range(learners)]
        frame = pd.DataFrame({"learner": rng.choice(names, 900), "time_ns": rng.integers(0, 10**12, 900),
                              "item": rng.choice([f"step-{n}" for n in range(items)], 900)})
        frame = frame.sort_values(["learner", "time_ns"], kind="stable").reset_index(drop=True)
        paths.append(tmp_path / f"day-{day}.parquet")
        pq.write_table(pa.Table.from_pandas(frame.astype({"learner": "category", "item": "category"}),
                                            preserve_index=False), paths[-1], row_group_size=100)
        frames.append(frame)
    widths = {pq.read_schema(path).field("item").type.index_type for path in paths}
    assert widths == {pa.int8(), pa.int16()}  # the files do differ
    learners = frozenset(pd.concat(frames)["learner"])
    merged = pa.concat_tables(LearnerBlocks(paths=tuple(paths), rows=1800, learners=learners, shared=True).blocks())
    reference = pd.concat(frames, ignore_index=True).sort_values(["learner", "time_ns"], kind="stable")
    frame = merged.to_pandas()
    assert frame["learner"].astype(str).tolist() == reference["learner"].tolist()
    assert frame["item"].astype(str).tolist() == reference["item"].tolist()
