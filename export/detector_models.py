"""Which detectors the check can fit, and which hyperparameter settings each one tries.

Three models a data scientist would try first, all from scikit-learn:
    logistic  median imputation, standardisation, class-balanced logistic regression;
              tries C in {0.01, 0.1, 1, 10}
    forest    median imputation, class-balanced random forest (100 trees, sqrt features);
              tries max_depth {8, None} x min_samples_leaf {2, 20}
    boosting  histogram gradient boosting (missing values handled natively, class-balanced,
              100 rounds, no early stopping); tries learning_rate {0.05, 0.2} x max_leaf_nodes {15, 31}
Each grid has at most 8 settings, so a nested search stays affordable.  Every classifier
asks for ``sample_weight`` through scikit-learn's metadata routing, so ``--weight
confidence`` reaches the fit; the step name is always ``model`` so grids read alike.
"""
from __future__ import annotations

from dataclasses import dataclass

from sklearn.base import ClassifierMixin
from sklearn.ensemble import HistGradientBoostingClassifier, RandomForestClassifier
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

MODELS: tuple[str, ...] = ("logistic", "forest", "boosting")
DEFAULT_MODEL = "logistic"


@dataclass(frozen=True)
class Candidate:
    """A model and the settings its nested search tries (keys are Pipeline parameter names)."""

    name: str
    pipeline: Pipeline
    grid: dict[str, list]

    @property
    def settings(self) -> int:
        count = 1
        for values in self.grid.values():
            count *= len(values)
        return count


def _classifier(name: str, seed: int) -> ClassifierMixin:
    if name == "logistic":
        return LogisticRegression(max_iter=1000, class_weight="balanced")
    if name == "forest":
        return RandomForestClassifier(n_estimators=100, max_features="sqrt", class_weight="balanced",
                                      random_state=seed, n_jobs=1)
    if name == "boosting":
        return HistGradientBoostingClassifier(max_iter=100, early_stopping=False, class_weight="balanced",
                                              random_state=seed)
    raise ValueError(f"model must be one of {MODELS}, not {name!r}")


GRIDS: dict[str, dict[str, list]] = {
    "logistic": {"model__C": [0.01, 0.1, 1.0, 10.0]},
    "forest": {"model__max_depth": [8, None], "model__min_samples_leaf": [2, 20]},
    "boosting": {"model__learning_rate": [0.05, 0.2], "model__max_leaf_nodes": [15, 31]},
}


def candidate(name: str, seed: int = 0) -> Candidate:
    """The pipeline and grid of one model.  Call inside ``sklearn.config_context(enable_metadata_routing=True)``
    (the classifier's sample-weight request needs routing turned on)."""
    classifier = _classifier(name, seed).set_fit_request(sample_weight=True)
    steps = [("impute", SimpleImputer(strategy="median", keep_empty_features=True))] if name != "boosting" else []
    if name == "logistic":
        steps.append(("scale", StandardScaler().set_fit_request(sample_weight=False)))  # weights go to the model only
    steps.append(("model", classifier))
    return Candidate(name=name, pipeline=Pipeline(steps), grid=GRIDS[name])
