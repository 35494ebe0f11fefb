"""A study's reliability data: its scheme as agreement/ sees it, and its paired units.

The one place the study folder meets agreement/: ``fieldmark agree``, ``fieldmark
adjudicate`` and the demo's agree step all get their units here, so they all pair the
same way (tolerance: half a window, agreement.pairing).  Once ``fieldmark align`` has
stored clock models, live windows are put on the log's clock before pairing, so two
laptops whose clocks disagree still pair by time.
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from agreement.dimensions import Dimension
from agreement.pairing import pair_observations
from observer_app.pipeline.alignment import stored_clock_models
from observer_app.study.scheme import Scheme
from observer_app.study.scheme_binding import check_scheme_binding
from observer_app.study.store import Store
from observer_app.study.folder import Study, load_study
from sync.clock import ClockModel
from sync.time_column import datetime_column_ns


def scheme_dimensions(scheme: Scheme) -> list[Dimension]:
    """agreement's view of the study's code scheme."""
    return [Dimension(name=dimension.name, level=dimension.level,
                      codes=tuple(code.name for code in dimension.codes),
                      could_not_observe=dimension.could_not_observe or None)
            for dimension in scheme.dimensions]


def on_log_clock(observations: pd.DataFrame, models: dict[str, ClockModel]) -> pd.DataFrame:
    """Live windows of devices with a clock model, moved onto the log's clock.

    Replay windows are left alone: a replayed clip is coded against the log itself.
    """
    moved = observations.copy()
    live = (moved["mode"] == "live").to_numpy(dtype=bool)
    devices = moved["device"].astype(str).to_numpy()
    for column in ("window_start", "window_end", "coded_at"):
        instants = datetime_column_ns(moved[column])
        for device, model in models.items():
            rows = live & (devices == device)
            instants[rows] = model.to_log_ns(instants[rows])
        moved[column] = pd.Series(pd.to_datetime(instants, utc=True), index=moved.index)  # int64 min -> NaT
    return moved


def study_units(study: Study) -> tuple[pd.DataFrame, list[Dimension], dict[str, object]]:
    """UNITS (agreement/tables.py), the dimensions and the pairing report of a loaded study.

    The report gains "clock": "log" when live windows were moved onto the log's clock
    (every coding device has a stored model), else "device".
    """
    dimensions = scheme_dimensions(study.scheme)
    names = [dimension.name for dimension in dimensions]
    with Store(study.store_path) as store:
        check_scheme_binding(study, store)
        observations = store.observations(names)
    models = stored_clock_models(study)
    live_devices = set(observations.loc[observations["mode"] == "live", "device"].astype(str))
    aligned = bool(live_devices) and live_devices <= set(models)
    if aligned:
        observations = on_log_clock(observations, models)
    units, report = pair_observations(observations, names, tolerance_s=study.window_seconds / 2.0)
    return units, dimensions, {**report.as_dict(), "clock": "log" if aligned else "device"}


def load_study_units(path: Path) -> tuple[pd.DataFrame, list[Dimension], dict[str, object], Path]:
    """``study_units`` of the study folder at ``path``, and its store's path."""
    study = load_study(path)
    units, dimensions, report = study_units(study)
    return units, dimensions, report, study.store_path
