"""A study's reliability data: its scheme as agreement/ sees it, and its paired units.

The one place the study folder meets agreement/: ``fieldmark agree``, ``fieldmark
adjudicate`` and the demo's agree step all get their units here, so they all pair the
same way (tolerance: half a window, agreement.pairing).
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from agreement.dimensions import Dimension
from agreement.pairing import pair_observations
from observer_app.scheme import Scheme
from observer_app.store import Store
from observer_app.study import Study, load_study


def scheme_dimensions(scheme: Scheme) -> list[Dimension]:
    """agreement's view of the study's code scheme."""
    return [Dimension(name=dimension.name, level=dimension.level,
                      codes=tuple(code.name for code in dimension.codes),
                      could_not_observe=dimension.could_not_observe or None)
            for dimension in scheme.dimensions]


def study_units(study: Study) -> tuple[pd.DataFrame, list[Dimension], dict[str, object]]:
    """UNITS (agreement/tables.py), the dimensions and the pairing report of a loaded study."""
    dimensions = scheme_dimensions(study.scheme)
    names = [dimension.name for dimension in dimensions]
    with Store(study.store_path) as store:
        observations = store.observations(names)
    units, report = pair_observations(observations, names, tolerance_s=study.window_seconds / 2.0)
    return units, dimensions, report.as_dict()


def load_study_units(path: Path) -> tuple[pd.DataFrame, list[Dimension], dict[str, object], Path]:
    """``study_units`` of the study folder at ``path``, and its store's path."""
    study = load_study(path)
    units, dimensions, report = study_units(study)
    return units, dimensions, report, study.store_path
