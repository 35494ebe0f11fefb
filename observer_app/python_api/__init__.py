"""fieldmark from Python: one import for notebooks (``import fieldmark``).

This package is installed under the name ``fieldmark`` (pyproject.toml maps it from
observer_app/python_api), so a notebook's own ``export.py`` or ``sync.py`` cannot shadow
it.  Each function is a thin door onto the same code the command line runs; results are
pandas objects whose columns are documented in the packages' tables.py modules.

Examples
--------
>>> import fieldmark
>>> study = fieldmark.open_study(demo_copy)
>>> study.name
'Panel wiring demo (seed 1)'
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from observer_app.study.folder import Study, load_study
from observer_app.study.store import Store

__all__ = ["Study", "open_study", "observations", "align", "agreement", "export_windows", "load_windows"]


def open_study(path: str | Path) -> Study:
    """Load and validate a study folder.

    Parameters
    ----------
    path : str or Path
        The study folder (study.toml, scheme.toml, roster.csv, observations.sqlite).

    Returns
    -------
    Study
        The study's settings, code scheme and roster (``study.roster`` is a DataFrame).

    Raises
    ------
    sync.errors.InputError
        When a file of the folder is missing or invalid; its message names the file and key.

    Examples
    --------
    >>> study = fieldmark.open_study(demo_copy)
    >>> list(study.scheme.dimension_names)
    ['activity', 'affect']
    """
    return load_study(Path(path))


def observations(study: Study) -> pd.DataFrame:
    """The study's observations as coded now (corrections applied).

    Parameters
    ----------
    study : Study
        From :func:`open_study`.

    Returns
    -------
    pandas.DataFrame
        One row per coded window; columns as OBSERVATIONS in observer_app/study/tables.py
        (observation_id, session_id, coder, device, mode, learner, slot, window_start,
        window_end, ..., then one column per dimension holding the code name).

    Examples
    --------
    >>> table = fieldmark.observations(study)
    >>> {"coder", "learner", "window_start", "activity"} <= set(table.columns)
    True
    """
    with Store(study.store_path) as store:
        return store.observations(study.scheme.dimension_names)


def align(study: Study, *, method: str = "best", offsets: dict[str, float] | None = None) -> pd.DataFrame:
    """Fit each coder device's clock model against the logs and record it in the store.

    Parameters
    ----------
    study : Study
        From :func:`open_study`; its store gains one clock model per device.
    method : {"best", "marks", "auto"}
        As ``fieldmark align --method``.
    offsets : dict of str to float, optional
        Hand-set offsets in seconds per device (``--set-offset DEVICE=SECONDS``).

    Returns
    -------
    pandas.DataFrame
        One row per device (index ``device``) with the figures ``fieldmark align --json``
        reports: method, offset_s, drift_ppm, offset_standard_error_s, ...

    Examples
    --------
    >>> models = fieldmark.align(study, method="marks")
    >>> sorted(models["method"].unique())
    ['marks']
    """
    from observer_app.pipeline.alignment import align_study, model_summary

    alignment = align_study(study, method=method, manual_offsets=offsets, command=f"fieldmark.align(method={method!r})")
    rows = {device: model_summary(model) for device, model in alignment.models.items()}
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("device")


def agreement(study: Study, *, resamples: int = 1000, seed: int = 1) -> pd.DataFrame:
    """Inter-rater reliability per dimension, as ``fieldmark agree`` computes it.

    Parameters
    ----------
    study : Study
        From :func:`open_study`.
    resamples : int
        Cluster-bootstrap resamples (learners are resampled) for the 95 % intervals.
    seed : int
        Seed of the resampling.

    Returns
    -------
    pandas.DataFrame
        One row per (dimension, figure) with columns ``value``, ``low``, ``high`` and
        ``units``; figure names as the keys of agreement/tables.py (cohen_kappa, alpha,
        percent_agreement, ...).

    Examples
    --------
    >>> figures = fieldmark.agreement(study, resamples=200)
    >>> bool(0 <= figures.loc[("activity", "percent_agreement"), "value"] <= 1)
    True
    """
    from agreement.statistics import assess_agreement
    from observer_app.pipeline.units import study_units

    found = study_units(study)
    result = assess_agreement(found.units, found.dimensions, resamples=resamples, seed=seed)
    rows = [{"dimension": name, "figure": figure, **estimate.as_dict(), "units": dimension.units}
            for name, dimension in result.dimensions.items() for figure, estimate in dimension.figures.items()]
    return pd.DataFrame(rows).set_index(["dimension", "figure"])


def export_windows(study: Study, out: str | Path, *, output_format: str = "parquet") -> Path:
    """Write the study's labelled, de-identified windows and their manifest.

    Parameters
    ----------
    study : Study
        From :func:`open_study`; every live device needs a clock model (:func:`align`).
    out : str or Path
        The data file to write (``.parquet`` or ``.csv``); the manifest goes beside it.
        Roster columns go out only when study.toml lists them (``[export] attributes``).
    output_format : {"parquet", "csv"}

    Returns
    -------
    Path
        The written data file, ready for :func:`load_windows`.

    Examples
    --------
    >>> path = fieldmark.export_windows(study, scratch / "windows.parquet")
    >>> path.name
    'windows.parquet'
    """
    from observer_app.pipeline.study_export import export_study

    from export.labelled_windows import ExportSettings

    settings = ExportSettings(attributes=study.export_attributes)  # the roster columns study.toml allows out
    export_study(study.dir, Path(out), output_format=output_format, settings=settings, progress=False)
    return Path(out)


def load_windows(path: str | Path, dimension: str | None = None) -> tuple[pd.DataFrame, pd.Series, pd.Series]:
    """Exported windows as scikit-learn wants them: features, labels and learner groups.

    Parameters
    ----------
    path : str or Path
        A file written by ``fieldmark export`` (or :func:`export_windows`).
    dimension : str, optional
        Which dimension's labels; the first label column by default.  Windows without
        a label for it are left out.

    Returns
    -------
    X : pandas.DataFrame
        The feature columns (float64), as listed in the manifest.
    y : pandas.Series
        The labels (code names).
    groups : pandas.Series
        The pseudonymous learner of each window: pass it to a grouped splitter so no
        learner is in two folds.

    Examples
    --------
    >>> X, y, groups = fieldmark.load_windows(path, "activity")
    >>> len(X) == len(y) == len(groups)
    True
    """
    from export.reader import load_windows as read

    return read(Path(path), dimension)
