"""Builders of OBSERVATIONS tables (observer_app/study/tables.py) for agreement tests."""
from __future__ import annotations

import pandas as pd
import pytest

from sync.windows import observations_on_log_clock

START = pd.Timestamp("2026-03-02 09:00", tz="UTC")


class ObservationBuilder:
    """Appends observation rows in the store's column contract; ``frame()`` returns the table."""

    def __init__(self) -> None:
        self.rows: list[dict] = []

    def add(self, coder: str, learner: str, start_s: float, *, mode: str = "live", paired: bool = False,
            slot: int | None = None, clip: str = "", window_s: float = 20.0, note: str = "",
            **codes: str | None) -> str:
        number = len(self.rows) + 1
        observation_id = f"obs-{number:04d}"
        self.rows.append({
            "observation_id": observation_id, "session_id": f"session-{coder}", "coder": coder,
            "device": f"laptop-{coder}", "mode": mode, "paired_start": START if paired else pd.NaT,
            "learner": learner, "slot": slot, "clip": clip,
            "window_start": START + pd.Timedelta(seconds=start_s),
            "window_end": START + pd.Timedelta(seconds=start_s + window_s),
            "coded_at": START + pd.Timedelta(seconds=start_s + window_s), **codes,
            "no_code": all(value is None for value in codes.values()), "note": note,
            "scheme_hash": "hash", "corrected": False,
        })
        return observation_id

    def frame(self, dimensions: tuple[str, ...] = ("activity", "affect")) -> pd.DataFrame:
        frame = pd.DataFrame(self.rows)
        for dimension in dimensions:
            if dimension not in frame:
                frame[dimension] = None
            frame[dimension] = frame[dimension].astype("string")
        frame["slot"] = frame["slot"].astype("Int64")
        return observations_on_log_clock(frame, {})  # no clock models: device times are log times


@pytest.fixture
def observations() -> ObservationBuilder:
    return ObservationBuilder()
