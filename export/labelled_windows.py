"""One exported row per unit: identity (pseudonymous), roster attributes, labels, features.

Glues the decisions made elsewhere -- the window (sync/windows.py), the features
(features.py), the winning label (labels.py), the pseudonyms (pseudonyms.py) -- into the
EXPORTED WINDOWS table of export/tables.py, and decides only what leaves the study:
roster labels, notes, ids of observations, sessions, devices and clips never do; raw
learner ids only with ``keep_ids``.
"""
from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field

import pandas as pd
import pyarrow as pa

from export.column_descriptions import describe_columns, feature_description
from export.features import (FEATURE_OF_COLUMN, FEATURES, FeatureFunction, FeatureSettings, compute_features,
                             compute_features_from_blocks)
from export.label_confidence import label_confidences
from export.labels import REPRESENTATIVE, resolve_labels, unit_keys
from export.pseudonyms import pseudonymise
from export.attributes import attribute_names, check_attributes
from export.tables import (
    CODERS, GROUP, LABEL_SOURCE_PREFIX, LEARNER, LOG_ID, MODE, END, START, UNIT, WINDOW_ID,
)
from sync.sorted_parquet import LearnerBlocks


@dataclass(frozen=True)
class ExportSettings:
    """Every choice that shapes the export; recorded in the manifest."""

    features: FeatureSettings = field(default_factory=FeatureSettings)
    policy: str = "first-coder"
    keep_could_not_observe: bool = False
    keep_ids: bool = False
    attributes: tuple[str, ...] = ()  # roster columns allowed out (export/attributes.py); none by default

    def parameters(self) -> dict:
        """JSON-ready record of the settings."""
        return asdict(self)


@dataclass(frozen=True)
class LabelledWindows:
    """The exported table and which of its columns are features, labels and attributes."""

    table: pd.DataFrame
    feature_columns: list[str]
    label_columns: list[str]
    attribute_columns: list[str]
    feature_definitions: dict[str, str]
    column_descriptions: dict[str, str]
    confidence_columns: dict[str, list[str]] = field(default_factory=dict)
    label_confidence: dict[str, dict | None] = field(default_factory=dict)

    def rows_per_label(self) -> dict[str, dict[str, int]]:
        """Per dimension: rows per code (labelled rows only)."""
        return {
            dimension: {str(code): int(count) for code, count in self.table[dimension].value_counts().sort_index().items()}
            for dimension in self.label_columns
        }


def label_windows(
    events: pd.DataFrame | pa.Table | LearnerBlocks,
    windows: pd.DataFrame,
    roster: pd.DataFrame,
    dimensions: Sequence[str],
    could_not_observe: Mapping[str, str],
    key: bytes | None,
    adjudications: pd.DataFrame | None = None,
    settings: ExportSettings = ExportSettings(),
    features: Mapping[str, FeatureFunction] = FEATURES,
) -> LabelledWindows:
    """The EXPORTED WINDOWS table (export/tables.py) for ``windows`` over ``events``.

    ``events``: EVENTS, or blocks of whole learners read one at a time.  ``key`` is the
    study's secret key; it may be None only with ``settings.keep_ids``.
    """
    if key is None and not settings.keep_ids:
        raise ValueError("a secret key is needed unless keep_ids is set")
    labels = resolve_labels(
        windows, dimensions, could_not_observe, adjudications, settings.policy, settings.keep_could_not_observe,
    )
    chosen = windows.loc[labels[REPRESENTATIVE].to_numpy()].reset_index(drop=True)
    computed = (compute_features_from_blocks(events.blocks(), chosen, settings.features, features)
                if isinstance(events, LearnerBlocks) else compute_features(events, chosen, settings.features, features))
    label_part = labels[[column for dimension in dimensions for column in (dimension, LABEL_SOURCE_PREFIX + dimension)]]
    posterior, confidence_columns, confidence = label_confidences(
        windows.assign(**{UNIT: unit_keys(windows)}), list(dimensions), dict(could_not_observe))
    label_part = pd.concat([label_part.reset_index(drop=True),
                            posterior.reindex(labels[UNIT].to_numpy()).reset_index(drop=True)], axis=1)
    feature_columns = [column for column in computed.columns if column not in (START, END)]
    wanted = list(settings.attributes)
    check_attributes(roster, wanted, chosen[LEARNER].astype(str))
    renamed = attribute_names(wanted, {WINDOW_ID, LEARNER, GROUP, LOG_ID, MODE, CODERS, START, END,
                                       *label_part.columns, *feature_columns})
    attributes = (roster.set_index(LEARNER)[wanted].reindex(chosen[LEARNER].to_numpy()).reset_index(drop=True)
                  .rename(columns=renamed))
    attribute_columns = list(renamed.values())
    if settings.keep_ids:
        identity = pd.DataFrame({
            WINDOW_ID: labels[UNIT].astype("string"),
            LEARNER: chosen[LEARNER].astype("string"),
            GROUP: chosen[LEARNER].astype("string"),
            LOG_ID: chosen[LOG_ID].astype("string"),
        })
    else:
        learner = pseudonymise(chosen[LEARNER], key)
        identity = pd.DataFrame({WINDOW_ID: pseudonymise(labels[UNIT], key), LEARNER: learner, GROUP: learner})
    table = pd.concat(
        [identity, attributes, pd.DataFrame({MODE: chosen[MODE].astype("string"), CODERS: labels[CODERS]}),
         computed[[START, END]], label_part.reset_index(drop=True), computed[feature_columns]],
        axis=1,
    )
    table = table.sort_values([START, WINDOW_ID], kind="stable").reset_index(drop=True)
    feature_of_column = computed.attrs.get(FEATURE_OF_COLUMN, {})
    return LabelledWindows(
        table=table, feature_columns=feature_columns, label_columns=list(dimensions),
        attribute_columns=attribute_columns,
        feature_definitions={column: feature_description(column, feature_of_column, features)
                             for column in feature_columns},
        column_descriptions=describe_columns(
            list(table.columns), feature_columns=feature_columns, label_columns=list(dimensions),
            attribute_columns=attribute_columns, feature_of_column=feature_of_column, features=features,
            confidence_columns=confidence_columns),
        confidence_columns=confidence_columns, label_confidence=confidence,
    )
