"""A study's log coverage: per observed learner, the log events in their observed windows
(sync.coverage decides what is counted; this module hands it the study's tables)."""
from __future__ import annotations

import pandas as pd

from observer_app.study.folder import Study
from observer_app.study.store import Store
from sync.clock import ClockModel
from sync.coverage import Coverage, learner_coverage
from sync.windows import observations_to_windows


def study_coverage(study: Study, events: pd.DataFrame, clock_models: dict[str, ClockModel]) -> Coverage:
    """Coverage of the study's observed windows (on the log's clock through ``clock_models``) by ``events``."""
    with Store(study.store_path) as store:
        observations = store.observations(study.scheme.dimension_names)
    windows = observations_to_windows(observations, clock_models, study.roster)
    return learner_coverage(events, windows)


def coverage_report(coverage: Coverage) -> dict:
    """JSON-ready: the counts of ``Coverage.summary`` plus "learners", one record per observed learner."""
    return {**coverage.summary(), "learners": coverage.learners.to_dict("records")}


def coverage_lines(report: dict) -> list[str]:
    """The human report of ``coverage_report`` (or a manifest's counts): a summary line,
    then one line per observed learner when the report names them."""
    lines = [f"coverage: {report['learners_with_events_in_windows']} of {report['learners_observed']} observed "
             f"learners have log events in their windows; {report['windows_with_zero_events']} of "
             f"{report['windows']} windows hold no event"]
    lines += [f"  {row['learner']} (log_id {row['log_id']}): {row['events_in_windows']} events in {row['windows']} "
              f"windows, {row['events_in_logs']} in the logs" for row in report.get("learners", [])]
    return lines
