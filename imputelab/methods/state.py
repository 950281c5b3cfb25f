"""Fitted state of methods as plain data, for saved models that load without running code.

A method's :meth:`~imputelab.methods.base.FillMethod._export_state` returns a tree of dicts,
lists, tuples, JSON scalars, numpy scalars, numpy arrays (numbers, booleans or fixed-width
text: never objects) and :class:`BoosterText`; ``_import_state`` rebuilds the method from the
same tree. Writing the tree to files is the engine's business (:mod:`imputelab.fill.saved`).

scikit-learn estimators are rebuilt from their constructor parameters and fitted attributes,
and only the classes in :data:`TRUSTED_ESTIMATORS`: nothing in a saved model can name a class
to instantiate. LightGBM models travel as their own text format.
"""

from __future__ import annotations

from typing import Any

import lightgbm as lgb
import numpy as np
from sklearn.impute import KNNImputer
from sklearn.linear_model import BayesianRidge, LogisticRegression

from imputelab.errors import DataError

__all__ = ["TRUSTED_ESTIMATORS", "BoosterModel", "BoosterText", "export_estimator",
           "export_knn", "import_estimator", "import_knn"]

#: The only scikit-learn classes a saved model may rebuild, by name.
TRUSTED_ESTIMATORS: dict[str, type] = {
    "BayesianRidge": BayesianRidge,
    "LogisticRegression": LogisticRegression,
}


class BoosterText(str):
    """A LightGBM model in LightGBM's text format (saved as a ``.txt`` file of its own)."""


class BoosterModel:
    """A LightGBM booster loaded from text, predicting as the scikit-learn wrapper it came from.

    Parameters
    ----------
    booster : lightgbm.Booster
    classes : ndarray, optional
        The classes of a classifier (``classes_``); ``None`` for a regressor.
    """

    def __init__(self, booster: lgb.Booster, classes: np.ndarray | None = None):
        self.booster = booster
        self.classes_ = classes

    @classmethod
    def from_fitted(cls, model: Any) -> BoosterModel:
        """The booster of a fitted ``LGBMRegressor`` or ``LGBMClassifier``."""
        classes = model.classes_ if isinstance(model, lgb.LGBMClassifier) else None
        return cls(model.booster_, classes)

    def to_text(self) -> BoosterText:
        """The booster in LightGBM's text format (up to the best iteration, when one is set)."""
        return BoosterText(self.booster.model_to_string())

    def predict_proba(self, features: Any) -> np.ndarray:
        """Class probabilities, one column per class (classifiers)."""
        # num_threads=1: what the wrapper passes for n_jobs=1 (threads do not change results)
        result = self.booster.predict(features, num_threads=1)
        if result.ndim == 1:  # binary: the wrapper stacks P(class 0), P(class 1) the same way
            return np.vstack((1.0 - result, result)).transpose()
        return result

    def predict(self, features: Any) -> np.ndarray:
        """Predictions: values for a regressor, the most probable class for a classifier."""
        if self.classes_ is None:
            return self.booster.predict(features, num_threads=1)
        return np.asarray(self.classes_)[np.argmax(self.predict_proba(features), axis=1)]


def export_estimator(estimator: Any) -> dict[str, Any]:
    """Constructor parameters and fitted attributes of a trusted scikit-learn estimator.

    Raises
    ------
    DataError
        For a class outside :data:`TRUSTED_ESTIMATORS`.
    """
    name = type(estimator).__name__
    if TRUSTED_ESTIMATORS.get(name) is not type(estimator):
        raise DataError(f"a model of type {name} cannot be saved: it is not a trusted type")
    fitted = {k: v for k, v in vars(estimator).items()
              if k.endswith("_") and not k.startswith("_")}
    return {"estimator": name, "params": estimator.get_params(deep=False), "fitted": fitted}


def import_estimator(state: dict[str, Any]) -> Any:
    """Rebuild an estimator written by :func:`export_estimator`.

    Raises
    ------
    DataError
        When the state names a class outside :data:`TRUSTED_ESTIMATORS` or a fitted attribute
        that is not an attribute name.
    """
    cls = TRUSTED_ESTIMATORS.get(state["estimator"])
    if cls is None:
        raise DataError(f"model names estimator '{state['estimator']}', which is not a trusted "
                        f"type ({', '.join(TRUSTED_ESTIMATORS)})")
    estimator = cls(**state["params"])
    for key, value in state["fitted"].items():
        if not (key.isidentifier() and key.endswith("_") and not key.startswith("_")):
            raise DataError(f"model sets attribute '{key}' on {cls.__name__}; only fitted "
                            "attributes (name_) may be set")
        setattr(estimator, key, value)
    return estimator


def export_knn(imputer: KNNImputer) -> dict[str, Any]:
    """A fitted ``KNNImputer``: its parameters and donor matrix."""
    # KNNImputer.fit only validates and stores its donors, so fitting a fresh imputer on the
    # same matrix rebuilds it exactly; _fit_X is that stored (validated, float) matrix.
    return {"params": imputer.get_params(deep=False), "donors": imputer._fit_X}


def import_knn(state: dict[str, Any]) -> KNNImputer:
    """Inverse of :func:`export_knn`."""
    return KNNImputer(**state["params"]).fit(np.asarray(state["donors"], dtype=float))
