"""The target experiment: score each way of filling by a model's cross-validated skill on a target.

The main experiment asks how close a fill comes to the hidden truth; this one asks what the user
usually cares about: after filling the feature columns, how well does a model predict the target
column? The rows with a known target are split into folds (shuffled ``KFold`` for a numeric
target, ``StratifiedKFold`` for labels). In each fold every fill method is fitted on the
training rows' features only, fills the training and the held-out rows, and two models are
fitted on the training rows and scored on the held-out rows:

``lightgbm``  LightGBM gradient-boosted trees (Ke et al. 2017, NeurIPS 30), which also take the
              blanks as they are (the ``no fill`` candidate);
``linear``    ridge regression or logistic regression on standardised numbers and one-hot
              labels; it cannot take blanks, so ``no fill`` does not apply to it.

The candidates are ``no fill``, and for each method ``M``: ``M`` and ``M + indicators`` (the
filled features plus a 0/1 column ``NAME__was_missing`` for every fill column with holes in
the training rows). The target is never a feature of a fill method and never decides a fill:
it only scores the models. Columns a method cannot fill are filled, in that method's
candidates, with the plain defaults the plan also falls back to (median for numbers and
timestamps, the most frequent label for labels), so both models see a complete table.

Metric: R² for a numeric target, ROC AUC for two labels, accuracy for more; greater is better
for all three. Each candidate and model gets the mean over folds and its standard error
(``std(ddof=1) / sqrt(k)``); the paired difference to the best candidate on the same folds is
also given, since fold-to-fold noise is shared by all candidates.

Seeds come from ``derive_seed(seed, "target-folds")`` for the folds and
``derive_seed(seed, "target", candidate_method, fold)`` for each task (``"no fill"`` stands for
the no-fill task), so the result does not depend on ``n_jobs``.
"""

from __future__ import annotations

import math
import time
import traceback
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from sklearn.compose import ColumnTransformer
from sklearn.exceptions import ConvergenceWarning
from sklearn.impute import SimpleImputer
from sklearn.inspection import permutation_importance
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.metrics import accuracy_score, r2_score, roc_auc_score
from sklearn.model_selection import KFold, StratifiedKFold
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler
from threadpoolctl import threadpool_limits

from imputelab.errors import DataError, OptionError
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import is_categorical, with_derived
from imputelab.io.columns import INDICATOR_SUFFIX
from imputelab.methods import get_method

__all__ = [
    "LGBM_PARAMS",
    "MAX_ROWS",
    "MODELS",
    "NO_FILL",
    "TargetResult",
    "run_target_experiment",
]

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
# A row cap keeps the cost bounded: on 2 cores the 5,000-row demo (11 features, all 8
# methods, 5 folds) takes about 50 s; the cost grows in step with the rows.
MAX_ROWS = 5000
MIN_FOLD_ROWS = 10  # held-out folds smaller than this give scores too noisy to compare
TARGET_KINDS = ("numeric", "binary", "categorical")
NOT_APPLICABLE = "the linear model cannot take blanks"
INDICATOR_RULE = ("recommend an indicator when the mean permutation importance over the "
                  "held-out folds is above 0 and above 2 standard errors (common practice, "
                  "no source)")


@dataclass(frozen=True, eq=False)
class TargetResult:
    """Cross-validated model scores of every fill candidate.

    Attributes
    ----------
    scores : DataFrame
        Tidy: one row per (candidate, model, fold) with columns ``candidate``, ``method``
        (None for ``no fill``), ``indicators`` (bool), ``model``, ``fold`` and ``score``.
    task : str
        ``regression`` or ``classification``.
    metric : str
        ``r2``, ``roc_auc`` or ``accuracy`` (greater is better for all).
    n_splits : int
    seed : int
    rows_used : int
        Rows in the folds.
    rows_missing_target : int
        Rows dropped because their target is missing.
    rows_left_out : int
        Rows with a target left out by ``max_rows``.
    classes : list or None
        Target labels in code order (for ROC AUC the positive label is the last).
    candidates : dict
        ``{candidate: {"method", "indicators", "lightgbm": {...}, "linear": {...}}}``; each
        model entry holds ``mean``, ``se``, ``folds``, ``complete`` (every fold scored),
        ``gap_to_best`` and ``gap_se`` (paired over folds), or ``applicable: False`` and a
        ``reason``.
    best : dict
        Best complete candidate per model (None when there is none).
    no_fill_best : bool
        ``no fill`` is the best candidate for LightGBM.
    no_fill_within_one_se : bool
        ``no fill`` is within one paired standard error of the best for LightGBM (by the
        project's simplicity rule, not filling would then do).
    indicators : dict
        ``{column: {"importance", "se", "folds", "recommend"}}`` from the best
        ``M + indicators`` candidate with LightGBM (see :data:`INDICATOR_RULE`).
    indicator_candidate : str or None
        The candidate the indicator importances come from.
    skipped : dict
        ``{column: {method: reason}}`` for methods that cannot fill a column.
    fallbacks : dict
        ``{column: "median" | "mode"}``: what fills a column a method skips.
    failures : list of dict
        Tasks that raised, with method, fold and message; the run went on without them.
    seconds : dict
        Time spent per candidate method (not part of :meth:`to_dict`, which is byte-stable).
    """

    scores: pd.DataFrame
    task: str
    metric: str
    n_splits: int
    seed: int
    rows_used: int
    rows_missing_target: int
    rows_left_out: int
    classes: list[Any] | None
    candidates: dict[str, dict[str, Any]]
    best: dict[str, str | None]
    no_fill_best: bool
    no_fill_within_one_se: bool
    indicators: dict[str, dict[str, Any]]
    indicator_candidate: str | None
    skipped: dict[str, dict[str, str]] = field(default_factory=dict)
    fallbacks: dict[str, str] = field(default_factory=dict)
    failures: list[dict[str, Any]] = field(default_factory=list)
    seconds: dict[str, float] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary: plain types, non-finite numbers as None, fixed key order."""
        return {
            "task": self.task,
            "metric": self.metric,
            "n_splits": self.n_splits,
            "seed": self.seed,
            "rows_used": self.rows_used,
            "rows_missing_target": self.rows_missing_target,
            "rows_left_out": self.rows_left_out,
            "classes": None if self.classes is None else [_plain(c) for c in self.classes],
            "candidates": _plain(self.candidates),
            "best": dict(self.best),
            "no_fill_best": self.no_fill_best,
            "no_fill_within_one_se": self.no_fill_within_one_se,
            "indicators": _plain(self.indicators),
            "indicator_candidate": self.indicator_candidate,
            "indicator_rule": INDICATOR_RULE,
            "skipped": _plain(self.skipped),
            "fallbacks": dict(self.fallbacks),
            "failures": _plain(self.failures),
        }


def _plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    return value


# ------------------------------------------------------------------------------ one task


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


def _target_task(
    working: pd.DataFrame,
    kinds: Mapping[str, str],
    y: np.ndarray,
    train: np.ndarray,
    test: np.ndarray,
    task: str,
    metric: str,
    method: str | None,
    params: Mapping[str, Any],
    targets: Sequence[str],
    fallbacks: Mapping[str, str],
    fill_columns: Sequence[str],
    seed: int,
) -> tuple[list[dict[str, Any]], tuple | None, float, str | None]:
    """Fill (unless ``method`` is None), fit both models, score them on the held-out rows.

    Returns the score records, the fitted LightGBM model of ``M + indicators`` with its
    held-out features (for the indicator importances, computed later for the best candidate
    only), the seconds spent, and the error message of a failure.
    """
    start = time.perf_counter()
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


def _importance_task(probe: tuple, metric: str, seed: int) -> dict[str, float]:
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


def _run(jobs: list, n_jobs: int):
    if n_jobs == 1:
        return (job[0](*job[1], **job[2]) for job in jobs)
    return Parallel(n_jobs=n_jobs, return_as="generator")(jobs)


# ------------------------------------------------------------------------------ the run


def _prepare_target(target: pd.Series, target_kind: str, name: str
                    ) -> tuple[np.ndarray, np.ndarray, list[Any] | None]:
    """Values as float (regression) or label codes, a known-target mask, and the labels."""
    known = target.notna().to_numpy()
    if target_kind == "numeric":
        try:
            values = pd.to_numeric(target, errors="raise").to_numpy(float, na_value=np.nan)
        except (TypeError, ValueError) as exc:
            raise DataError(f"{name}: not numeric ({exc})") from None
        if np.isinf(values[known]).any():
            raise DataError(f"{name}: holds infinite values")
        return values, known, None
    labels = target.astype(object)[known]
    found = list(pd.unique(labels))
    try:
        classes = sorted(found)
    except TypeError:
        classes = sorted(found, key=str)
    codes = np.full(len(target), -1)
    codes[known] = pd.Categorical(labels, categories=classes).codes
    return codes, known, classes


def run_target_experiment(
    working: pd.DataFrame,
    kinds: Mapping[str, str],
    fill_columns: Sequence[str],
    target: pd.Series,
    target_kind: str,
    *,
    methods: Sequence[str] | Mapping[str, Mapping[str, Any]],
    n_splits: int = 5,
    seed: int = 0,
    n_jobs: int = 1,
    dtypes: Mapping[str, Any] | None = None,
    max_rows: int | None = MAX_ROWS,
    progress: Callable[[int, int], None] | None = None,
) -> TargetResult:
    """Score no fill and every fill method by cross-validated model performance on a target.

    Parameters
    ----------
    working : DataFrame
        Working frame (see :mod:`imputelab.frame.encoding`) of the feature columns. It must not hold
        the target: the target scores the models and never reaches a fill method.
    kinds : mapping
        Kind of every working column.
    fill_columns : sequence of str
        Columns the methods fill (the other working columns are features as they are).
    target : Series
        Target values, aligned with ``working``'s rows (same length and index). Rows with a
        missing target are dropped from this experiment.
    target_kind : {"numeric", "binary", "categorical"}
        ``numeric`` gives a regression, the others a classification.
    methods : sequence of str, or mapping of name to parameters
        Candidate fill methods.
    n_splits : int, default=5
        Folds.
    seed : int, default=0
        Root of every seed in the run.
    n_jobs : int, default=1
        Parallel (method, fold) tasks (joblib); BLAS and LightGBM run one thread per task.
    dtypes : mapping, optional
        The table's dtypes, for methods whose applicability depends on them.
    max_rows : int or None, default=5000
        Use at most this many rows with a known target, drawn with
        ``derive_seed(seed, "target-rows")`` (None: every row). The cost grows with the rows.
    progress : callable, optional
        Called as ``progress(done, total)`` after each task.

    Returns
    -------
    TargetResult

    Raises
    ------
    OptionError
        For ``n_splits`` below 2, a ``max_rows`` too small for the folds, or an unknown method.
    DataError
        For a target in ``working``, misaligned, of an unusable kind, with fewer than two
        classes or distinct values, with a class smaller than ``n_splits``, or with too few
        rows (fewer than 10 per fold).
    """
    if isinstance(n_splits, bool) or not isinstance(n_splits, int | np.integer) or n_splits < 2:
        raise OptionError(f"n_splits must be an integer of at least 2, got {n_splits!r}")
    n_splits = int(n_splits)
    if max_rows is not None and max_rows < MIN_FOLD_ROWS * n_splits:
        raise OptionError(f"max_rows must be at least {MIN_FOLD_ROWS * n_splits} for "
                          f"{n_splits} folds of {MIN_FOLD_ROWS} rows, got {max_rows}")
    plan = ({m: dict(p) for m, p in methods.items()} if isinstance(methods, Mapping)
            else {m: {} for m in methods})
    classes_of = {m: get_method(m, **p).__class__ for m, p in plan.items()}  # OptionError
    if target_kind not in TARGET_KINDS:
        raise DataError(f"a {target_kind} column cannot be a target; the target must be one "
                        f"of: {', '.join(TARGET_KINDS)}")
    if not isinstance(target, pd.Series):
        target = pd.Series(target, index=working.index)
    if target.name is not None and target.name in working.columns:
        raise DataError(f"the target '{target.name}' is among the feature columns; the "
                        "target must never be used to fill the features")
    if len(target) != len(working) or not target.index.equals(working.index):
        raise DataError(f"the target ({len(target)} rows) is not aligned with the feature "
                        f"rows ({len(working)}): give it the same length and index")
    fill_columns = list(fill_columns)
    unknown = [c for c in fill_columns if c not in working.columns]
    if unknown:
        raise DataError(f"fill columns not in the feature table: {', '.join(unknown)}")
    no_kind = [c for c in working.columns if c not in kinds]
    if no_kind:
        raise DataError(f"no kind given for feature columns: {', '.join(no_kind)}")

    name = f"target '{target.name}'" if target.name is not None else "the target"
    y, known, classes = _prepare_target(target, target_kind, name)
    missing_target = int((~known).sum())
    rows = np.flatnonzero(known)
    left_out = 0
    if max_rows is not None and len(rows) > max_rows:
        rng = np.random.default_rng(derive_seed(seed, "target-rows"))
        left_out = len(rows) - max_rows
        rows = np.sort(rng.choice(rows, max_rows, replace=False))
    frame = working.iloc[rows]
    y = y[rows]
    if len(rows) < MIN_FOLD_ROWS * n_splits:
        raise DataError(f"{name} is known in only {len(rows)} rows; {n_splits} folds need at "
                        f"least {MIN_FOLD_ROWS * n_splits} ({MIN_FOLD_ROWS} a fold)")
    if classes is None:
        task = "regression"
        if len(np.unique(y)) < 2:
            raise DataError(f"{name} has fewer than 2 distinct values; nothing to predict")
        metric = "r2"
        splitter: Any = KFold(n_splits, shuffle=True,
                              random_state=derive_seed(seed, "target-folds"))
    else:
        task = "classification"
        counts = np.bincount(y, minlength=len(classes))
        present = [c for c, k in zip(classes, counts, strict=True) if k > 0]
        if len(present) < 2:
            raise DataError(f"{name} has fewer than 2 classes; nothing to predict")
        rare = [f"{c!s} ({k})" for c, k in zip(classes, counts, strict=True)
                if 0 < k < n_splits]
        if rare:
            raise DataError(f"{name}: classes with fewer rows than the {n_splits} folds: "
                            f"{', '.join(rare)}; merge them or use fewer folds")
        if len(present) < len(classes):  # a label seen only in rows left out
            y = pd.Categorical.from_codes(y, categories=classes)
            y = pd.Categorical(y, categories=present).codes.astype(int)
            classes = present
        metric = "roc_auc" if len(classes) == 2 else "accuracy"
        splitter = StratifiedKFold(n_splits, shuffle=True,
                                   random_state=derive_seed(seed, "target-folds"))
    folds = list(splitter.split(np.zeros((len(y), 1)), y))

    dtypes = dtypes or {}
    holed = [c for c in fill_columns if frame[c].isna().any()]
    skipped: dict[str, dict[str, str]] = {}
    fallbacks = {c: ("mode" if is_categorical(frame[c]) else "median") for c in holed}
    targets: dict[str, list[str]] = {}
    skips: dict[str, dict[str, str]] = {}
    for method, cls in classes_of.items():
        targets[method], skips[method] = [], {}
        for column in holed:
            n_labels = (len(frame[column].cat.categories) if is_categorical(frame[column])
                        else None)
            reason = cls.unsupported_reason(kinds[column], dtypes.get(column), n_labels)
            if reason:
                skipped.setdefault(column, {})[method] = reason
                skips[method][column] = fallbacks[column]
            else:
                targets[method].append(column)
    used_fallbacks = {c: fallbacks[c] for c in holed if c in skipped}

    tasks = [(method, fold) for method in [None, *plan] for fold in range(n_splits)]
    # the importances of the best "M + indicators" candidate: one step per fold, at the end
    total = len(tasks) + (n_splits if plan and holed else 0)
    jobs = [
        delayed(_target_task)(
            frame, kinds, y, folds[fold][0], folds[fold][1], task, metric, method,
            plan.get(method, {}), targets.get(method, []), skips.get(method, {}),
            fill_columns, _task_seed(seed, method, fold))
        for method, fold in tasks
    ]
    records: list[dict[str, Any]] = []
    probes: dict[tuple[str, int], tuple] = {}
    failures: list[dict[str, Any]] = []
    seconds = dict.fromkeys([NO_FILL, *plan], 0.0)
    done = 0
    for (method, fold), (rows_out, probe, spent, error) in zip(
        tasks, _run(jobs, n_jobs), strict=True
    ):
        key = NO_FILL if method is None else method
        seconds[key] += spent
        if error:
            failures.append({"method": key, "fold": fold, "error": error})
        for record in rows_out:
            record["fold"] = fold
            records.append(record)
        if method is not None and probe is not None:
            probes[(method, fold)] = probe
        done += 1
        if progress is not None:
            progress(done, total)

    columns = ["candidate", "method", "indicators", "model", "fold", "score"]
    scores = pd.DataFrame.from_records(records, columns=columns)
    scores["indicators"] = scores["indicators"].astype(bool)
    scores["fold"] = scores["fold"].astype(int)
    scores["score"] = scores["score"].astype(float)
    order = [NO_FILL] + [c for m in plan for c in (m, f"{m} + indicators")]
    candidates, best = _summarise(scores, order, n_splits)
    no_fill = candidates[NO_FILL]["lightgbm"]
    no_fill_best = best["lightgbm"] == NO_FILL
    within = bool(no_fill_best or (
        no_fill.get("gap_to_best") is not None and no_fill["gap_to_best"] <= no_fill["gap_se"]))

    source = _indicator_source(candidates, plan)
    importances: dict[int, dict[str, float]] = {}
    if source is not None:
        method = candidates[source]["method"]
        folds_with = [f for f in range(n_splits) if (method, f) in probes]
        jobs = [delayed(_importance_task)(probes[(method, f)], metric,
                                          _task_seed(seed, method, f))
                for f in folds_with]
        for fold, found in zip(folds_with, _run(jobs, n_jobs), strict=True):
            importances[fold] = found
            done += 1
            if progress is not None:
                progress(done, total)
    probes.clear()
    if progress is not None and done < total:
        progress(total, total)
    indicators = _indicator_summary(importances)
    return TargetResult(
        scores=scores, task=task, metric=metric, n_splits=n_splits, seed=seed,
        rows_used=len(rows), rows_missing_target=missing_target, rows_left_out=left_out,
        classes=classes, candidates=candidates, best=best, no_fill_best=no_fill_best,
        no_fill_within_one_se=within, indicators=indicators,
        indicator_candidate=source if indicators else None,
        skipped=skipped, fallbacks=used_fallbacks, failures=failures, seconds=seconds,
    )


def _task_seed(seed: int, method: str | None, fold: int) -> int:
    return derive_seed(seed, "target", NO_FILL if method is None else method, fold)


def _mean_se(values: np.ndarray) -> tuple[float, float]:
    if len(values) == 0:
        return math.nan, math.nan
    se = float(values.std(ddof=1) / math.sqrt(len(values))) if len(values) > 1 else math.nan
    return float(values.mean()), se


def _summarise(scores: pd.DataFrame, order: list[str], n_splits: int
               ) -> tuple[dict[str, dict[str, Any]], dict[str, str | None]]:
    """Per candidate and model: mean, SE, folds; then the best and the paired gaps to it."""
    candidates: dict[str, dict[str, Any]] = {}
    per_fold: dict[tuple[str, str], np.ndarray] = {}
    for candidate in order:
        method = None if candidate == NO_FILL else candidate.removesuffix(" + indicators")
        entry: dict[str, Any] = {"method": method, "indicators": candidate.endswith(
            " + indicators")}
        for model in MODELS:
            if candidate == NO_FILL and model == "linear":
                entry[model] = {"applicable": False, "reason": NOT_APPLICABLE}
                continue
            part = scores[(scores["candidate"] == candidate) & (scores["model"] == model)]
            values = np.full(n_splits, np.nan)
            values[part["fold"].to_numpy(int)] = part["score"].to_numpy(float)
            finite = values[np.isfinite(values)]
            mean, se = _mean_se(finite)
            complete = len(finite) == n_splits
            if complete:
                per_fold[(candidate, model)] = values
            entry[model] = {"applicable": True, "mean": mean, "se": se,
                            "folds": int(len(finite)), "complete": complete,
                            "per_fold": [float(v) for v in values],
                            "gap_to_best": None, "gap_se": None}
        candidates[candidate] = entry
    best: dict[str, str | None] = {}
    for model in MODELS:
        ranked = [(c, candidates[c][model]["mean"]) for c in order if (c, model) in per_fold]
        top = max(ranked, key=lambda item: item[1], default=None)  # first of equals wins
        best[model] = None if top is None else top[0]
        if top is None:
            continue
        for candidate in order:
            if (candidate, model) in per_fold:
                gap = per_fold[(top[0], model)] - per_fold[(candidate, model)]
                mean, se = _mean_se(gap)
                candidates[candidate][model]["gap_to_best"] = mean
                candidates[candidate][model]["gap_se"] = se
    return candidates, best


def _indicator_source(candidates: Mapping[str, Mapping[str, Any]],
                      plan: Mapping[str, Any]) -> str | None:
    """The best complete ``M + indicators`` candidate with LightGBM (first of equals)."""
    flagged = [f"{m} + indicators" for m in plan
               if candidates[f"{m} + indicators"]["lightgbm"]["complete"]]
    return max(flagged, key=lambda c: candidates[c]["lightgbm"]["mean"], default=None)


def _indicator_summary(importances: Mapping[int, Mapping[str, float]]
                       ) -> dict[str, dict[str, Any]]:
    """Mean and SE over folds of each indicator's importance, and the recommendation."""
    columns: list[str] = []
    for fold in sorted(importances):
        columns += [c for c in importances[fold] if c not in columns]
    out = {}
    for column in columns:
        values = np.array([importances[f][column] for f in sorted(importances)
                           if column in importances[f]])
        mean, se = _mean_se(values)
        recommend = bool(len(values) > 1 and mean > 0 and mean > 2 * se)
        out[column] = {"importance": mean, "se": se, "folds": int(len(values)),
                       "recommend": recommend}
    return out
