"""Window features computed a few learners at a time are bit-identical to one pass over the
whole log: every figure is per learner, and the one choice across learners (which action_
and outcome_ columns exist) is made from all windows' rows first."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from export.features import FEATURES, FeatureSettings, WindowEvents, compute_features
from tests.export.test_features_against_duckdb import random_log

ONE_BLOCK = 10**12
HISTORY = ("history_attempts", "history_error_rate", "attempts_without_success", "wheel_spinning",
           "seconds_since_previous")


def assert_bit_identical(blocked: pd.DataFrame, whole: pd.DataFrame) -> None:
    assert list(blocked.columns) == list(whole.columns)
    assert blocked.index.equals(whole.index)
    for column in whole.columns:  # bit for bit, NaN where NaN
        assert np.array_equal(blocked[column].to_numpy(), whole[column].to_numpy(), equal_nan=True), column
    assert blocked.attrs == whole.attrs


def rare_actions(events: pd.DataFrame) -> pd.DataFrame:
    """Fifteen actions (more than the top ten), some only in one learner's log: the column
    choice must look past any one block."""
    events = events.copy()
    only_first = events["learner"] == "n-000"
    events.loc[only_first, "action"] = np.where(np.arange(only_first.sum()) % 3 == 0, "reset_panel",
                                                events.loc[only_first, "action"])
    for number in range(8):
        mine = events["learner"] == f"n-{number + 3:03d}"
        events.loc[mine & (np.arange(len(events)) % (number + 2) == 0), "action"] = f"rare_{number}"
    return events


@pytest.mark.parametrize("block_rows", [1, 50, 700])
@pytest.mark.parametrize("seed", [1, 2])
def test_blocks_of_learners_give_the_same_features_bit_for_bit(seed: int, block_rows: int) -> None:
    events, windows = random_log(seed, learners=14, events=4000, windows=500)
    events = rare_actions(events)
    settings = FeatureSettings(help_actions=("hint",), wheel_spinning_attempts=3)
    whole = compute_features(events, windows, settings, block_rows=ONE_BLOCK)
    blocked = compute_features(events, windows, settings, block_rows=block_rows)
    assert_bit_identical(blocked, whole)
    for column in HISTORY:  # the learner's history before the window was exercised
        assert np.nansum(whole[column].to_numpy()) > 0, column
    assert len([column for column in whole.columns if column.startswith("action_")]) == 10


@pytest.mark.parametrize("arrow", ["dictionary", "plain strings"])
def test_blocks_from_arrow_chunks_and_unsorted_rows_match_one_pass(arrow: str) -> None:
    events, windows = random_log(4, learners=10, events=3000, windows=300)
    events = rare_actions(events)
    table = pa.Table.from_pandas(events, preserve_index=False)
    if arrow == "dictionary":
        table = pa.table({name: table[name].dictionary_encode() if name != "time_ns" else table[name]
                          for name in table.column_names})
    chunked = pa.Table.from_batches(table.to_batches(max_chunksize=170))  # rows out of order across chunks
    assert chunked["action"].num_chunks > 10
    whole = compute_features(events, windows, block_rows=ONE_BLOCK)
    assert_bit_identical(compute_features(chunked, windows, block_rows=40), whole)
    ordered = chunked.take(pa.array(np.lexsort((events["time_ns"].to_numpy(), events["learner"].to_numpy()))))
    assert_bit_identical(compute_features(ordered, windows, block_rows=40), whole)


def test_a_feature_that_chooses_columns_from_its_own_block_is_refused() -> None:
    events, windows = random_log(3, learners=6, events=600, windows=60)

    def own_items(view: WindowEvents) -> dict[str, np.ndarray]:
        """Columns from this block's items only (wrong: a block sees only its learners)."""
        present = view.item.names[np.flatnonzero(view.item.counts(view.member))]
        return {f"item_{name}": np.zeros(len(view.counts)) for name in present}

    registry = {**FEATURES, "own_items": own_items}
    compute_features(events, windows, features=registry, block_rows=ONE_BLOCK)  # one block: nothing to differ
    events = events.assign(item=np.where(events["learner"] == "n-000", "only-here", events["item"]))
    with pytest.raises(ValueError, match="differ between blocks"):
        compute_features(events, windows, features=registry, block_rows=1)
