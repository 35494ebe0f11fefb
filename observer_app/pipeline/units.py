"""A study's units: the one answer to "which observations were coded together" for every verb.

``fieldmark agree``, ``fieldmark adjudicate``, ``fieldmark export``, the app's end screen
and the demo all call ``study_units``, so they all see the same units: observations are
put on the log's clock by ``sync.windows.observations_on_log_clock`` (through the stored
clock models) and paired by ``agreement.pairing`` with the study's tolerance
(``agreement.pairing.pairing_tolerance_s``).  Adjudications are placed on these units by
the observations they settle (``agreement.disagreements.place_adjudications``); an old
store's adjudications, keyed only by a unit id, are traced back to their observations
through ``legacy_unit_observations``.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from agreement.dimensions import Dimension
from agreement.disagreements import place_adjudications
from agreement.pairing import pair_observations, pairing_tolerance_s
from observer_app.pipeline.alignment import require_clock_models, stored_clock_models
from observer_app.study.folder import Study, load_study
from observer_app.study.scheme import Scheme
from observer_app.study.scheme_binding import check_scheme_binding
from observer_app.study.store import Store
from sync.clock import ClockModel
from sync.clock_sessions import model_for
from sync.errors import InputError
from sync.windows import observations_on_log_clock


@dataclass(frozen=True)
class StudyUnits:
    """The units of a study and what they were made from."""

    units: pd.DataFrame  # UNITS (agreement/tables.py)
    dimensions: list[Dimension]
    report: dict[str, object]  # the pairing report, plus "clock": "log" | "device" and "pairing_tolerance_s"
    observations: pd.DataFrame  # OBSERVATIONS with log_start_ns, log_end_ns
    clock_models: dict[str, ClockModel]
    store_path: Path


def scheme_dimensions(scheme: Scheme) -> list[Dimension]:
    """agreement's view of the study's code scheme."""
    return [Dimension(name=dimension.name, level=dimension.level,
                      codes=tuple(code.name for code in dimension.codes),
                      could_not_observe=dimension.could_not_observe or None)
            for dimension in scheme.dimensions]


def study_units(study: Study, observations: pd.DataFrame | None = None,
                clock_models: dict[str, ClockModel] | None = None) -> StudyUnits:
    """The study's units; ``observations`` / ``clock_models`` default to the store's.

    The report's "clock" is "log" when every live coding device has a clock model, else
    "device" (devices without one keep their own times; ``observations.attrs["warnings"]``
    names them).
    """
    dimensions = scheme_dimensions(study.scheme)
    names = [dimension.name for dimension in dimensions]
    if observations is None:
        with Store(study.store_path) as store:
            check_scheme_binding(study, store)
            observations = store.observations(names)
    models = stored_clock_models(study) if clock_models is None else clock_models
    on_log = observations_on_log_clock(observations, models)
    tolerance = pairing_tolerance_s(study.window_seconds)
    units, report = pair_observations(on_log, names, tolerance_s=tolerance)
    live = observations[observations["mode"] == "live"]
    aligned = bool(len(live)) and all(model_for(models, device, session_id) is not None for device, session_id
                                      in zip(live["device"].astype(str), live["session_id"].astype(str)))
    return StudyUnits(units=units, dimensions=dimensions,
                      report={**report.as_dict(), "clock": "log" if aligned else "device",
                              "pairing_tolerance_s": tolerance},
                      observations=on_log, clock_models=models, store_path=study.store_path)


def load_study_units(path: Path) -> StudyUnits:
    """``study_units`` of the study folder at ``path``.

    What `fieldmark agree` and `adjudicate` use: a live device without a clock model is
    refused (InputError), never paired on its own clock by default.
    """
    study = load_study(path)
    with Store(study.store_path) as store:
        check_scheme_binding(study, store)
        observations = store.observations(study.scheme.dimension_names)
    models = stored_clock_models(study)
    require_clock_models(study, observations, models)
    return study_units(study, observations, models)


def legacy_unit_observations(found: StudyUnits) -> dict[str, str]:
    """Unit id -> its observation ids joined by "|", for the unit ids an older fieldmark
    could have shown: today's units and those of pairing on the devices' own clocks
    (what export and an unaligned agree paired by before units were one)."""
    on_device_clock = observations_on_log_clock(found.observations.drop(columns=["log_start_ns", "log_end_ns"]), {})
    old, _ = pair_observations(on_device_clock, [d.name for d in found.dimensions],
                               tolerance_s=float(found.report["pairing_tolerance_s"]))
    both = pd.concat([old[["unit", "observation_id"]], found.units[["unit", "observation_id"]]], ignore_index=True)
    both = both.drop_duplicates().sort_values(["unit", "observation_id"], kind="stable")
    return both.groupby("unit", sort=False)["observation_id"].agg("|".join).to_dict()


def placed_adjudications(found: StudyUnits, adjudications: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(placed, unplaced) adjudications of the study on ``found``'s units; see
    ``agreement.disagreements.place_adjudications``."""
    legacy = legacy_unit_observations(found) if (adjudications["observations"].fillna("") == "").any() else {}
    return place_adjudications(adjudications, found.units, legacy)


def require_placed(found: StudyUnits, adjudications: pd.DataFrame) -> pd.DataFrame:
    """The placed adjudications; InputError naming up to three that no current unit holds."""
    placed, unplaced = placed_adjudications(found, adjudications)
    if len(unplaced):
        shown = "; ".join(
            f"{row.dimension}={row.code} by {row.adjudicator} (unit {row.unit}, observations "
            f"{', '.join(str(row.observations).split('|')[:3]) or 'unknown'})"
            for row in unplaced.head(3).itertuples())
        more = f" and {len(unplaced) - 3} more" if len(unplaced) > 3 else ""
        raise InputError(found.store_path, "adjudications",
                         f"{len(unplaced)} adjudication(s) settle observations that are no longer one unit: "
                         f"{shown}{more}; list the current disagreements with `fieldmark agree STUDY "
                         "--disagreements FILE` and adjudicate those units again")
    return placed


def no_observations_error(found: StudyUnits) -> InputError:
    return InputError(found.store_path, None, "no observations yet; code a session in the app or "
                                              "`fieldmark import STUDY FILE` first")


def shift_warning(hint: dict) -> str:
    """The words for one of agreement.pairing's clock shift hints."""
    return (f"{hint['would_pair']} of {hint['of']} unmatched observations of devices {hint['device']} and "
            f"{hint['other_device']} would pair if {hint['device']}'s times were moved {hint['shift_hours']:+g} h: "
            "a wrong UTC offset or a summer-time slip? its windows may be that far off the log; check that device's "
            "clock (`fieldmark align STUDY`, the times in its CSV)")
