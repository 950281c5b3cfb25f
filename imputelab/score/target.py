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

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from sklearn.model_selection import KFold, StratifiedKFold

from imputelab.errors import DataError, OptionError
from imputelab.executors.pool import Executor, JoblibExecutor
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import is_categorical
from imputelab.methods import get_method
from imputelab.score.experiment import _method_targets
from imputelab.score.target_models import (
    LGBM_PARAMS,
    MODELS,
    NO_FILL,
    TargetShared,
    importance_task,
    target_task,
)
from imputelab.score.target_summary import (
    INDICATOR_RULE,
    indicator_source,
    indicator_summary,
    plain,
    summarise,
)

__all__ = [
    "LGBM_PARAMS",
    "MAX_ROWS",
    "MODELS",
    "NO_FILL",
    "TargetResult",
    "run_target_experiment",
]

# A row cap keeps the cost bounded: on 2 cores the 5,000-row demo (11 features, all 8
# methods, 5 folds) takes about 50 s; the cost grows in step with the rows.
MAX_ROWS = 5000
MIN_FOLD_ROWS = 10  # held-out folds smaller than this give scores too noisy to compare
TARGET_KINDS = ("numeric", "binary", "categorical")


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
            "classes": None if self.classes is None else [plain(c) for c in self.classes],
            "candidates": plain(self.candidates),
            "best": dict(self.best),
            "no_fill_best": self.no_fill_best,
            "no_fill_within_one_se": self.no_fill_within_one_se,
            "indicators": plain(self.indicators),
            "indicator_candidate": self.indicator_candidate,
            "indicator_rule": INDICATOR_RULE,
            "skipped": plain(self.skipped),
            "fallbacks": dict(self.fallbacks),
            "failures": plain(self.failures),
        }


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
    executor: Executor | None = None,
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
    executor : Executor, optional
        Where the (method, fold) tasks and the importance steps run
        (:mod:`imputelab.executors.pool`, e.g. a Dask cluster), as the main experiment's
        grid does; by default ``n_jobs`` local processes. The result does not depend on it.

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
    setup = _setup(working, kinds, fill_columns, target, target_kind, methods, n_splits,
                   max_rows, seed, dtypes or {})
    return _run(setup, executor if executor is not None else JoblibExecutor(n_jobs), seed,
                progress)


@dataclass(frozen=True)
class _Setup:
    """The checked request: rows, folds, candidates and what each method fills."""

    shared: TargetShared
    plan: dict[str, dict[str, Any]]
    n_splits: int
    classes: list[Any] | None
    rows_used: int
    rows_missing_target: int
    rows_left_out: int
    holed: list[str]
    targets: dict[str, list[str]]
    skipped: dict[str, dict[str, str]]
    fallbacks: dict[str, str]


def _setup(working: pd.DataFrame, kinds: Mapping[str, str], fill_columns: Sequence[str],
           target: Any, target_kind: str,
           methods: Sequence[str] | Mapping[str, Mapping[str, Any]], n_splits: Any,
           max_rows: int | None, seed: int, dtypes: Mapping[str, Any]) -> _Setup:
    n_splits, plan = _check_request(n_splits, max_rows, methods)
    for method, params in plan.items():
        get_method(method, **params)  # an unknown method is an OptionError
    if not isinstance(target, pd.Series):
        target = pd.Series(target, index=working.index)
    fill_columns = _check_frames(working, kinds, fill_columns, target, target_kind)
    name = f"target '{target.name}'" if target.name is not None else "the target"
    y, known, classes = _prepare_target(target, target_kind, name)
    rows, left_out = _rows_used(known, max_rows, seed)
    frame, y = working.iloc[rows], y[rows]
    if len(rows) < MIN_FOLD_ROWS * n_splits:
        raise DataError(f"{name} is known in only {len(rows)} rows; {n_splits} folds need at "
                        f"least {MIN_FOLD_ROWS * n_splits} ({MIN_FOLD_ROWS} a fold)")
    task, metric, y, classes, splitter = _task_and_folds(y, classes, n_splits, seed, name)
    folds = list(splitter.split(np.zeros((len(y), 1)), y))
    holed = [c for c in fill_columns if frame[c].isna().any()]
    fallbacks = {c: ("mode" if is_categorical(frame[c]) else "median") for c in holed}
    targets, skipped = _method_targets(frame, kinds, holed, plan, dtypes)
    return _Setup(TargetShared(frame, kinds, y, folds, task, metric, fill_columns), plan,
                  n_splits, classes, len(rows), int((~known).sum()), left_out, holed, targets,
                  skipped, fallbacks)


def _run(setup: _Setup, executor: Executor, seed: int,
         progress: Callable[[int, int], None] | None) -> TargetResult:
    """The grid, the ranking, the importances of the best candidate with indicators."""
    plan, n_splits, shared = setup.plan, setup.n_splits, setup.shared
    skips = {m: {c: f for c, f in setup.fallbacks.items() if m in setup.skipped.get(c, {})}
             for m in plan}
    tasks = [(method, fold, plan.get(method, {}), setup.targets.get(method, []),
              skips.get(method, {}), _task_seed(seed, method, fold))
             for method in [None, *plan] for fold in range(n_splits)]
    # the importances of the best "M + indicators" candidate: one step per fold, at the end
    total = len(tasks) + (n_splits if plan and setup.holed else 0)
    scores, probes, failures, seconds = _run_grid(executor, shared, tasks, plan,
                                                  _offset(progress, 0, total))
    order = [NO_FILL] + [c for m in plan for c in (m, f"{m} + indicators")]
    candidates, best = summarise(scores, order, n_splits)
    no_fill = candidates[NO_FILL]["lightgbm"]
    no_fill_best = best["lightgbm"] == NO_FILL
    within = bool(no_fill_best or (
        no_fill.get("gap_to_best") is not None and no_fill["gap_to_best"] <= no_fill["gap_se"]))
    source = indicator_source(candidates, plan)
    importances = _importances(executor, probes, candidates, source, shared.metric, seed,
                               n_splits, _offset(progress, len(tasks), total))
    if progress is not None and len(tasks) + len(importances) < total:
        progress(total, total)
    indicators = indicator_summary(importances)
    return TargetResult(
        scores=scores, task=shared.task, metric=shared.metric, n_splits=n_splits, seed=seed,
        rows_used=setup.rows_used, rows_missing_target=setup.rows_missing_target,
        rows_left_out=setup.rows_left_out, classes=setup.classes, candidates=candidates,
        best=best, no_fill_best=no_fill_best, no_fill_within_one_se=within,
        indicators=indicators, indicator_candidate=source if indicators else None,
        skipped=setup.skipped, failures=failures, seconds=seconds,
        fallbacks={c: f for c, f in setup.fallbacks.items() if c in setup.skipped},
    )


def _check_request(n_splits: Any, max_rows: int | None,
                   methods: Sequence[str] | Mapping[str, Mapping[str, Any]]
                   ) -> tuple[int, dict[str, dict[str, Any]]]:
    if isinstance(n_splits, bool) or not isinstance(n_splits, int | np.integer) or n_splits < 2:
        raise OptionError(f"n_splits must be an integer of at least 2, got {n_splits!r}")
    n_splits = int(n_splits)
    if max_rows is not None and max_rows < MIN_FOLD_ROWS * n_splits:
        raise OptionError(f"max_rows must be at least {MIN_FOLD_ROWS * n_splits} for "
                          f"{n_splits} folds of {MIN_FOLD_ROWS} rows, got {max_rows}")
    plan = ({m: dict(p) for m, p in methods.items()} if isinstance(methods, Mapping)
            else {m: {} for m in methods})
    return n_splits, plan


def _check_frames(working: pd.DataFrame, kinds: Mapping[str, str], fill_columns: Sequence[str],
                  target: pd.Series, target_kind: str) -> list[str]:
    """The target apart from the features and aligned with them; every column known."""
    if target_kind not in TARGET_KINDS:
        raise DataError(f"a {target_kind} column cannot be a target; the target must be one "
                        f"of: {', '.join(TARGET_KINDS)}")
    if target.name is not None and target.name in working.columns:
        raise DataError(f"the target '{target.name}' is among the feature columns; the "
                        "target must never be used to fill the features")
    if len(target) != len(working) or not target.index.equals(working.index):
        raise DataError(f"the target ({len(target)} rows) is not aligned with the feature "
                        f"rows ({len(working)}): give it the same length and index")
    unknown = [c for c in fill_columns if c not in working.columns]
    if unknown:
        raise DataError(f"fill columns not in the feature table: {', '.join(unknown)}")
    no_kind = [c for c in working.columns if c not in kinds]
    if no_kind:
        raise DataError(f"no kind given for feature columns: {', '.join(no_kind)}")
    return list(fill_columns)


def _rows_used(known: np.ndarray, max_rows: int | None, seed: int) -> tuple[np.ndarray, int]:
    """Rows with a known target, at most ``max_rows`` of them, and how many were left out."""
    rows = np.flatnonzero(known)
    if max_rows is None or len(rows) <= max_rows:
        return rows, 0
    rng = np.random.default_rng(derive_seed(seed, "target-rows"))
    return np.sort(rng.choice(rows, max_rows, replace=False)), len(rows) - max_rows


def _task_and_folds(y: np.ndarray, classes: list[Any] | None, n_splits: int, seed: int,
                    name: str) -> tuple[str, str, np.ndarray, list[Any] | None, Any]:
    """Regression or classification, its metric, and the fold splitter."""
    fold_seed = derive_seed(seed, "target-folds")
    if classes is None:
        if len(np.unique(y)) < 2:
            raise DataError(f"{name} has fewer than 2 distinct values; nothing to predict")
        return "regression", "r2", y, None, KFold(n_splits, shuffle=True,
                                                  random_state=fold_seed)
    counts = np.bincount(y, minlength=len(classes))
    present = [c for c, k in zip(classes, counts, strict=True) if k > 0]
    if len(present) < 2:
        raise DataError(f"{name} has fewer than 2 classes; nothing to predict")
    rare = [f"{c!s} ({k})" for c, k in zip(classes, counts, strict=True) if 0 < k < n_splits]
    if rare:
        raise DataError(f"{name}: classes with fewer rows than the {n_splits} folds: "
                        f"{', '.join(rare)}; merge them or use fewer folds")
    if len(present) < len(classes):  # a label seen only in rows left out
        y = pd.Categorical.from_codes(y, categories=classes)
        y = pd.Categorical(y, categories=present).codes.astype(int)
        classes = present
    metric = "roc_auc" if len(classes) == 2 else "accuracy"
    return "classification", metric, y, classes, StratifiedKFold(
        n_splits, shuffle=True, random_state=fold_seed)


def _offset(progress: Callable[[int, int], None] | None, before: int, total: int
            ) -> Callable[[int, int], None] | None:
    """Progress of one stage of the run as a part of the whole run's count."""
    if progress is None:
        return None
    return lambda done, _: progress(before + done, total)


def _run_grid(executor: Executor, shared: TargetShared, tasks: list[tuple], plan: Mapping,
              progress: Callable[[int, int], None] | None
              ) -> tuple[pd.DataFrame, dict, list[dict[str, Any]], dict[str, float]]:
    """Every (method, fold) task; the tidy scores, the probes, failures and seconds."""
    records: list[dict[str, Any]] = []
    probes: dict[tuple[str, int], tuple] = {}
    failures: list[dict[str, Any]] = []
    seconds = dict.fromkeys([NO_FILL, *plan], 0.0)
    for (method, fold, *_), (rows_out, probe, spent, error) in zip(
            tasks, executor.map(target_task, shared, tasks, progress), strict=True):
        key = NO_FILL if method is None else method
        seconds[key] += spent
        if error:
            failures.append({"method": key, "fold": fold, "error": error})
        for record in rows_out:
            record["fold"] = fold
            records.append(record)
        if method is not None and probe is not None:
            probes[(method, fold)] = probe
    columns = ["candidate", "method", "indicators", "model", "fold", "score"]
    scores = pd.DataFrame.from_records(records, columns=columns)
    scores["indicators"] = scores["indicators"].astype(bool)
    scores["fold"] = scores["fold"].astype(int)
    scores["score"] = scores["score"].astype(float)
    return scores, probes, failures, seconds


def _importances(executor: Executor, probes: dict[tuple[str, int], tuple],
                 candidates: Mapping[str, Any], source: str | None, metric: str, seed: int,
                 n_splits: int, progress: Callable[[int, int], None] | None
                 ) -> dict[int, dict[str, float]]:
    """Permutation importances of the indicator columns of ``source``, fold by fold."""
    if source is None:
        return {}
    method = candidates[source]["method"]
    folds_with = [f for f in range(n_splits) if (method, f) in probes]
    tasks = [(probes[(method, f)], _task_seed(seed, method, f)) for f in folds_with]
    found = executor.map(importance_task, metric, tasks, progress)
    return dict(zip(folds_with, found, strict=True))


def _task_seed(seed: int, method: str | None, fold: int) -> int:
    return derive_seed(seed, "target", NO_FILL if method is None else method, fold)
