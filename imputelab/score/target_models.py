"""The target check's tasks: fill one fold, fit both models, score them; indicator importances.

See :mod:`imputelab.score.target` for what the check measures. Every task runs through an
executor (:mod:`imputelab.executors.pool`) as ``fn(shared, *task)``.
"""

from __future__ import annotations

import time
import traceback
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd
from sklearn.compose import ColumnTransformer
from sklearn.exceptions import ConvergenceWarning
from sklearn.impute import SimpleImputer
from sklearn.inspection import permutation_importance
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.metrics import accuracy_score, r2_score, roc_auc_score
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler
from threadpoolctl import threadpool_limits

from imputelab.frame.encoding import is_categorical, with_derived
from imputelab.io.columns import INDICATOR_SUFFIX
from imputelab.methods import get_method

__all__ = ["LGBM_PARAMS", "MODELS", "NO_FILL", "TargetShared", "importance_task", "target_task"]

NO_FILL = "no fill"
MODELS = ("lightgbm", "linear")
# Modest, deterministic boosting: enough trees to be a fair judge of a fill, cheap on one core.
LGBM_PARAMS: dict[str, Any] = dict(
    n_estimators=200, num_leaves=31, learning_rate=0.05, n_jobs=1, deterministic=True,
    force_row_wise=True, verbose=-1,
)
RIDGE_ALPHA = 1.0
LOGISTIC_MAX_ITER = 1000
IMPORTANCE_REPEATS = 5
NOT_APPLICABLE = "the linear model cannot take blanks"


class _FixedRest:
    """A fitted model seen through some of its columns, the others held fixed.

    :func:`sklearn.inspection.permutation_importance` permutes every column it is given; giving
    it the indicator columns alone keeps the cost to what is asked.
    """

    def __init__(self, model: Any, rest: pd.DataFrame, order: list[str]):
        self.model, self.rest, self.order = model, rest, order

    def fit(self, X: Any, y: Any = None) -> _FixedRest:  # permutation_importance asks for one
        return self

    def full(self, X: pd.DataFrame) -> pd.DataFrame:
        out = self.rest.copy()
        for name in X.columns:
            out[name] = X[name].to_numpy()
        return out[self.order]


def _response(model: Any, X: pd.DataFrame, metric: str) -> np.ndarray:
    if metric == "roc_auc":
        return model.predict_proba(X)[:, 1]
    return model.predict(X)


def _score(metric: str, y: np.ndarray, response: np.ndarray) -> float:
    if metric == "r2":
        return float(r2_score(y, response))
    if metric == "roc_auc":
        return float(roc_auc_score(y, response))
    return float(accuracy_score(y, response))


def _lightgbm(task: str, seed: int) -> Any:
    if task == "regression":
        return lgb.LGBMRegressor(**LGBM_PARAMS, random_state=seed)
    return lgb.LGBMClassifier(**LGBM_PARAMS, random_state=seed)


def _linear(task: str, X: pd.DataFrame) -> Pipeline:
    labels = [c for c in X.columns if is_categorical(X[c])]
    numbers = [c for c in X.columns if c not in labels]
    # The imputer is a safety net only: every candidate fills its columns before this, so it
    # acts on nothing but a column with no observed value in the training rows.
    prepare = ColumnTransformer([
        ("numbers", Pipeline([("rest", SimpleImputer(strategy="mean")),
                              ("scale", StandardScaler())]), numbers),
        ("labels", OneHotEncoder(handle_unknown="ignore", sparse_output=False), labels),
    ])
    model = (Ridge(alpha=RIDGE_ALPHA) if task == "regression"
             else LogisticRegression(max_iter=LOGISTIC_MAX_ITER))
    return Pipeline([("prepare", prepare), ("model", model)])


def _align_categories(train: pd.DataFrame, test: pd.DataFrame) -> tuple[pd.DataFrame,
                                                                        pd.DataFrame]:
    """Give both frames' label columns the same categories (a fill may add a label to one)."""
    train, test = train.copy(), test.copy()
    for name in train.columns:
        if is_categorical(train[name]) and is_categorical(test[name]):
            first, second = list(train[name].cat.categories), list(test[name].cat.categories)
            if first != second:
                union = first + [c for c in second if c not in first]
                train[name] = train[name].cat.set_categories(union)
                test[name] = test[name].cat.set_categories(union)
    return train, test


def _fill(train: pd.DataFrame, test: pd.DataFrame, kinds: Mapping[str, str], method: str,
          params: Mapping[str, Any], targets: Sequence[str], fallbacks: Mapping[str, str],
          seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Fit ``method`` (and the fallbacks) on the training rows only; fill both parts."""
    columns = list(train.columns)
    train_x, test_x = with_derived(train, kinds), with_derived(test, kinds)
    steps: list[tuple[str, Mapping[str, Any], list[str]]] = []
    if targets:
        steps.append((method, params, list(targets)))
    for name in ("median", "mode"):
        cols = [c for c, f in fallbacks.items() if f == name]
        if cols:
            steps.append((name, {}, cols))
    for name, step_params, cols in steps:
        estimator = get_method(name, **step_params)
        if "random_state" in estimator.get_params():
            estimator.set_params(random_state=seed)
        # fit_transform on the training rows: a chain's own last state, no second pass
        train_x = estimator.fit_transform(train_x, cols)
        test_x = estimator.transform(test_x)
    return train_x[columns], test_x[columns]


def _features(filled: pd.DataFrame, raw: pd.DataFrame, kinds: Mapping[str, str],
              indicators: Sequence[str]) -> pd.DataFrame:
    # Derived datetime features are made again from the filled timestamps, so they agree.
    out = with_derived(filled, kinds)
    if indicators:
        flags = {f"{n}{INDICATOR_SUFFIX}": raw[n].isna().to_numpy(float) for n in indicators}
        out = pd.concat([out, pd.DataFrame(flags, index=out.index)], axis=1)
    return out


@dataclass(frozen=True)
class TargetShared:
    """What every (method, fold) task reads: sent once to every worker."""

    working: pd.DataFrame
    kinds: Mapping[str, str]
    y: np.ndarray
    folds: Sequence[tuple[np.ndarray, np.ndarray]]
    task: str
    metric: str
    fill_columns: Sequence[str]


def target_task(
    shared: TargetShared,
    method: str | None,
    fold: int,
    params: Mapping[str, Any],
    targets: Sequence[str],
    fallbacks: Mapping[str, str],
    seed: int,
) -> tuple[list[dict[str, Any]], tuple | None, float, str | None]:
    """Fill (unless ``method`` is None), fit both models, score them on the held-out rows.

    Returns the score records, the fitted LightGBM model of ``M + indicators`` with its
    held-out features (for the indicator importances, computed later for the best candidate
    only), the seconds spent, and the error message of a failure.
    """
    start = time.perf_counter()
    working, kinds, task, metric = shared.working, shared.kinds, shared.task, shared.metric
    train, test = shared.folds[fold]
    y, fill_columns = shared.y, shared.fill_columns
    records: list[dict[str, Any]] = []
    probe = None
    with threadpool_limits(limits=1), warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        try:
            raw_train, raw_test = working.iloc[train], working.iloc[test]
            y_train, y_test = y[train], y[test]
            if method is None:
                variants = [(NO_FILL, None, False, raw_train, raw_test, ("lightgbm",))]
            else:
                filled_train, filled_test = _fill(raw_train, raw_test, kinds, method, params,
                                                  targets, fallbacks, seed)
                variants = [
                    (method, method, False, filled_train, filled_test, MODELS),
                    (f"{method} + indicators", method, True, filled_train, filled_test, MODELS),
                ]
            for candidate, name, flagged, part_train, part_test, models in variants:
                flags = ([c for c in fill_columns if raw_train[c].isna().any()] if flagged
                         else [])
                X_train, X_test = _align_categories(
                    _features(part_train, raw_train, kinds, flags),
                    _features(part_test, raw_test, kinds, flags))
                for model_name in models:
                    model = (_lightgbm(task, seed) if model_name == "lightgbm"
                             else _linear(task, X_train))
                    model.fit(X_train, y_train)
                    value = _score(metric, y_test, _response(model, X_test, metric))
                    records.append({"candidate": candidate, "method": name,
                                    "indicators": flagged, "model": model_name,
                                    "score": value})
                    if model_name == "lightgbm" and flags:
                        probe = (model, X_test, y_test, flags)
        except Exception as exc:  # one task's failure is recorded; the run goes on
            last = traceback.format_exception_only(type(exc), exc)[-1].strip()
            return [], None, time.perf_counter() - start, last
    return records, probe, time.perf_counter() - start, None


def importance_task(metric: str, probe: tuple, seed: int) -> dict[str, float]:
    """Permutation importance of each indicator column on one held-out fold."""
    model, X_test, y_test, flagged = probe
    names = [f"{n}{INDICATOR_SUFFIX}" for n in flagged]
    view = _FixedRest(model, X_test.drop(columns=names), list(X_test.columns))

    def scorer(estimator: _FixedRest, X: pd.DataFrame, y: np.ndarray) -> float:
        return _score(metric, y, _response(estimator.model, estimator.full(X), metric))

    with threadpool_limits(limits=1):
        found = permutation_importance(view, X_test[names], y_test, scoring=scorer,
                                       n_repeats=IMPORTANCE_REPEATS, random_state=seed)
    return {column: float(v) for column, v in zip(flagged, found.importances_mean, strict=True)}
