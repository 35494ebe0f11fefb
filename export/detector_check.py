"""Is there signal, and for whom?  A grouped, cross-validated check of a detector per dimension.

The model (export/detector_models.py: logistic, forest or boosting) is tuned by nested
grouped cross-validation (export/nested_search.py): no learner is ever in both a training
and a test fold, inner folds included.  Out-of-fold predictions of all folds are pooled
and scored (export/out_of_fold.py) beside two baselines on the same folds: always the
training fold's majority code, and random codes drawn with the training fold's
frequencies.  Then, from the same predictions: calibration (export/calibration.py),
per-group figures for each ``--by`` attribute and per way the label was reached
(export/subgroups.py), and, for ``--transfer``, how the detector does on a group it
was not trained on (export/transfer.py).  ``weight="confidence"`` weights each training
window by the label-confidence posterior of its label (export/label_confidence.py).
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import ClassifierMixin, clone
from sklearn.dummy import DummyClassifier
from threadpoolctl import threadpool_limits

from export.calibration import calibration
from export.cluster_bootstrap import DEFAULT_RESAMPLES
from export.detector_models import DEFAULT_MODEL, GRIDS
from export.label_confidence import confidence_column
from export.nested_search import most_chosen, tuned_out_of_fold
from export.out_of_fold import DEFAULT_FOLDS, Score, auc_definition, grouped_folds, score
from export.reader import read_windows, windows_xy
from export.subgroups import MIN_LEARNERS, group_figures
from export.tables import CODERS, LABEL_SOURCE_PREFIX
from export.transfer import transfer_audit
from sync.errors import InputError

__all__ = ["CheckSettings", "DEFAULT_FOLDS", "DimensionCheck", "Score", "check_dimension", "check_windows",
           "grouped_folds", "score"]

WEIGHTS: tuple[str, ...] = ("none", "confidence")
LABEL_ROUTES: dict[str, str] = {
    "agreed": "agreed or adjudicated", "adjudicated": "agreed or adjudicated", "single": "single coder",
    "first-coder": "coders disagreed", "majority": "coders disagreed",
}
"""How a label was reached (export/labels.py) -> the route the check reports figures for."""


@dataclass(frozen=True)
class CheckSettings:
    """Every choice of one check; echoed in the output."""

    model: str = DEFAULT_MODEL
    folds: int = DEFAULT_FOLDS
    seed: int = 0
    by: tuple[str, ...] = ()
    transfer: str | None = None
    weight: str = "none"
    min_learners: int = MIN_LEARNERS
    resamples: int = DEFAULT_RESAMPLES


@dataclass(frozen=True)
class DimensionCheck:
    """The check of one dimension (keys documented in export/tables.py, CHECK OUTPUT)."""

    dimension: str
    rows: int
    learners: int
    folds: int
    codes: dict[str, int]
    model: Score
    majority_baseline: Score
    stratified_baseline: Score
    model_name: str = DEFAULT_MODEL
    auc_definition: str = ""
    settings_tried: int = 0
    chosen_settings: list[dict] = field(default_factory=list)
    calibration: dict | None = None
    by: dict[str, list[dict]] = field(default_factory=dict)
    label_routes: list[dict] | None = None
    transfer: dict | None = None

    def as_dict(self) -> dict:
        return asdict(self)


def out_of_fold(
    model: ClassifierMixin, features: pd.DataFrame, labels: pd.Series, folds: list[tuple[np.ndarray, np.ndarray]],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(codes in order, predicted code per row, probability per row and code) of an untuned model (the baselines)."""
    codes = np.unique(labels.to_numpy())
    predicted = np.empty(len(labels), dtype=object)
    probability = np.zeros((len(labels), len(codes)))
    for train, test in folds:
        fitted = clone(model).fit(features.iloc[train], labels.iloc[train])
        predicted[test] = fitted.predict(features.iloc[test])
        columns = np.searchsorted(codes, fitted.classes_)
        probability[np.ix_(test, columns)] = fitted.predict_proba(features.iloc[test])
    return codes, predicted, probability


def check_dimension(
    features: pd.DataFrame, labels: pd.Series, groups: pd.Series, dimension: str,
    settings: CheckSettings = CheckSettings(), context: pd.DataFrame | None = None,
    weights: np.ndarray | None = None,
) -> DimensionCheck:
    """The tuned model and both baselines on the same learner-grouped folds, then the audit.

    ``context``: the same rows' attribute columns (for ``settings.by``/``transfer``) and, when
    the file has them, ``coders`` and ``label_source_<dimension>``.  ``weights``: per row, for the fit.
    """
    with threadpool_limits(limits=1):  # many small fits: BLAS and OpenMP threads only contend
        return _check_dimension(features, labels, groups, dimension, settings, context, weights)


def _check_dimension(features, labels, groups, dimension, settings, context, weights) -> DimensionCheck:
    splits = grouped_folds(labels, groups, settings.folds, settings.seed)
    for train, _ in splits:
        if labels.iloc[train].nunique() < 2:
            raise InputError(None, f"dimension {dimension}", f"a fold of learners holds only code "
                             f"{labels.iloc[train].iloc[0]!r}; each code needs windows of several learners "
                             "(check fewer dimensions or code more learners)")
    tuned = tuned_out_of_fold(settings.model, features, labels, groups, splits, settings.seed, weights)
    codes = tuned.codes
    baselines = {}
    for name, model in (("majority", DummyClassifier(strategy="most_frequent")),
                        ("stratified", DummyClassifier(strategy="stratified", random_state=settings.seed))):
        _, predicted, probability = out_of_fold(model, features, labels, splits)
        baselines[name] = (predicted, probability)
    truth = labels.to_numpy()
    learner = groups.to_numpy()
    context = pd.DataFrame(index=labels.index) if context is None else context
    multi_coded, agreed = _agreement_rows(context, dimension)

    def figures_by(values) -> list[dict]:
        return group_figures(values, learner, truth, codes, (tuned.predicted, tuned.probability), baselines,
                             multi_coded, agreed, settings.min_learners, settings.resamples, settings.seed)

    source = context.get(LABEL_SOURCE_PREFIX + dimension)
    transfer = None
    if settings.transfer is not None:
        transfer = transfer_audit(features, labels, learner, context[settings.transfer], settings.model,
                                  most_chosen(tuned.chosen), seed=settings.seed, min_learners=settings.min_learners,
                                  weights=weights)
    return DimensionCheck(
        dimension=dimension, rows=len(labels), learners=int(groups.nunique()), folds=len(splits),
        codes={str(code): int(count) for code, count in labels.value_counts().sort_index().items()},
        model=score(truth, codes, tuned.predicted, tuned.probability),
        majority_baseline=score(truth, codes, *baselines["majority"]),
        stratified_baseline=score(truth, codes, *baselines["stratified"]),
        model_name=settings.model, auc_definition=auc_definition(codes),
        settings_tried=len(_settings(settings.model)), chosen_settings=tuned.chosen,
        calibration=calibration(truth, codes, tuned.probability).as_dict(),
        by={attribute: figures_by(context[attribute]) for attribute in settings.by},
        label_routes=None if source is None else figures_by(source.map(LABEL_ROUTES)),
        transfer=transfer,
    )


def _settings(model: str) -> list[dict]:
    from sklearn.model_selection import ParameterGrid

    return list(ParameterGrid(GRIDS[model]))


def _agreement_rows(context: pd.DataFrame, dimension: str) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Per row: coded by two or more coders with a known outcome (0/1), and all agreed (0/1).

    Adjudicated labels are left out: the file does not say whether their coders agreed."""
    source_column = LABEL_SOURCE_PREFIX + dimension
    if CODERS not in context or source_column not in context:
        return None, None
    source = context[source_column].astype("string")
    known = (pd.to_numeric(context[CODERS], errors="coerce") >= 2) & source.isin(["agreed", "first-coder", "majority"])
    return known.to_numpy(dtype=float), (known & source.eq("agreed")).to_numpy(dtype=float)


def refuse_eventless(table: pd.DataFrame, manifest: dict, path: Path) -> None:
    """A file whose windows hold no log event (every feature zero or missing, or every
    event_count zero) describes no behaviour: a detector "trained" on it is meaningless,
    and it almost always means the roster's log ids or the clock models are wrong."""
    features = table[manifest["feature_columns"]].astype("float64")
    no_events = "event_count" in features and bool((features["event_count"].fillna(0) == 0).all())
    if no_events or bool((features.fillna(0) == 0).all().all()):
        raise InputError(path, "features", "every window has zero log events, so every feature is empty; check "
                                           "roster.csv's log_id against the logs and the clock models, then export again")


def check_windows(path: Path, dimensions: list[str] | None = None, settings: CheckSettings = CheckSettings()) -> list[DimensionCheck]:
    """Check every (or the named) dimension of an exported windows file."""
    table, manifest = read_windows(path)  # one read for every dimension
    refuse_eventless(table, manifest, path)
    allowed = manifest.get("attribute_columns", [])
    for attribute in (*settings.by, *([settings.transfer] if settings.transfer else [])):
        if attribute not in allowed:
            raise InputError(path, attribute, "not an attribute this export carries; choose one of "
                             + (", ".join(allowed) or "(none: the roster had no attribute columns)"))
    if settings.weight not in WEIGHTS:
        raise InputError(None, "--weight", f"{settings.weight!r} is not one of {', '.join(WEIGHTS)}")
    results = []
    for dimension in dimensions or manifest["label_columns"]:
        features, labels, groups = windows_xy(table, manifest, path, dimension)
        if groups.nunique() < 2:
            raise InputError(path, dimension, "needs labelled windows of at least two learners for grouped folds")
        if labels.nunique() < 2:
            raise InputError(path, dimension, f"every labelled window has code {labels.iloc[0]!r}; a detector "
                             "needs at least two codes to tell apart")
        labelled = table[table[dimension].notna()].reset_index(drop=True)
        context = labelled[[column for column in (*allowed, CODERS, LABEL_SOURCE_PREFIX + dimension)
                            if column in labelled]]
        weights = _confidence_weights(labelled, labels, manifest, path, dimension) if settings.weight == "confidence" else None
        results.append(check_dimension(features, labels, groups, dimension, settings, context, weights))
    return results


def _confidence_weights(labelled: pd.DataFrame, labels: pd.Series, manifest: dict, path: Path,
                        dimension: str) -> np.ndarray:
    """Per row, the label-confidence posterior of the row's own label.  An adjudicated label is a
    person's decision and keeps full weight, as does a code the coders never used."""
    columns = (manifest.get("confidence_columns") or {}).get(dimension)
    if not columns:
        raise InputError(path, dimension, "has no label-confidence columns (p_<dimension>_<code>); export the "
                         "study again with this fieldmark, or drop --weight confidence")
    weights = np.zeros(len(labels))
    for code in np.unique(labels.to_numpy()):
        column = confidence_column(dimension, code)
        mine = (labels == code).to_numpy()
        if column in labelled:
            weights[mine] = labelled.loc[mine, column].fillna(1.0).to_numpy(dtype=float)
        else:
            weights[mine] = 1.0
    source = labelled.get(LABEL_SOURCE_PREFIX + dimension)
    if source is not None:
        weights[source.astype("string").eq("adjudicated").fillna(False).to_numpy()] = 1.0
    return weights
