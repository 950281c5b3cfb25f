"""The experiment: hide known cells, fill them with every method, score against the truth.

The grid is masks x repeats x methods. Each (mask, repeat) draws one set of hidden cells over
all scored columns at once; every method sees exactly the same hidden cells. A method fills all
the columns it can in one fit (a chained method is one model of the whole table), and is then
scored on each column. Seeds are derived from (seed, mask, repeat, method), never from the
order in which tasks run, so one job or many give the same numbers.

With ``blend`` and all its components among the methods, the blend costs no fit of its own:
draw ``r`` is scored with weights fitted on the components' fills of the *other* draws, on
their hidden cells that draw ``r`` does not hide (cross-fitting: no hidden value of draw ``r``
is a cell the weights are fitted on; see :mod:`imputelab.methods.blend` for the indirect path
through the other draws' models), and the plan's weights come from every draw.
"""

from __future__ import annotations

import time
import traceback
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from imputelab.executors.pool import Executor, JoblibExecutor
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import is_categorical, with_derived
from imputelab.masks import get_mask
from imputelab.methods import get_method
from imputelab.methods.blend import COMPONENTS, fit_blend
from imputelab.metrics.scores import correlation_shift, score_cells, variance_ratio

__all__ = ["ExperimentResult", "column_scales", "draw_hidden", "run_experiment"]


@dataclass
class ExperimentResult:
    """Scores of every method on every column, for every hidden-cell draw.

    Attributes
    ----------
    scores : DataFrame
        Tidy: one row per (column, method, mask, repeat) with one column per metric.
    seconds : dict
        Total fit + fill seconds per method over the grid.
    skipped : dict
        ``{column: {method: reason}}`` for methods that cannot fill a column.
    failures : list of dict
        Methods that raised, with mask, repeat and message; the run went on without them.
    hidden : dict
        Number of hidden cells per column and mask (first repeat).
    blend : dict
        With ``blend`` and its components in the grid: ``weights`` and ``label_method``
        fitted on every draw (what a plan stores), and ``draws``, the weights each draw was
        scored with (fitted on the other draws' hidden cells only).
    task_seconds : dict
        Fit + fill seconds per ``(mask, repeat, method)``.
    fills : dict
        With ``keep_fills``: ``{(mask, repeat): {method: {column: values}}}``, each
        method's values in the cells that were empty after masking, in row order.
    draws : list
        ``(mask, repeat, hidden)`` of every draw, ``hidden`` a boolean rows x columns array.
    held_out : dict
        ``{mask: cells}``, the held-out cells given to :func:`run_experiment` (boolean rows x
        columns): missing in every fit of that mask's draws and hidden by none of them.
    """

    scores: pd.DataFrame
    seconds: dict[str, float] = field(default_factory=dict)
    skipped: dict[str, dict[str, str]] = field(default_factory=dict)
    failures: list[dict[str, Any]] = field(default_factory=list)
    hidden: dict[str, dict[str, int]] = field(default_factory=dict)
    blend: dict[str, Any] = field(default_factory=dict)
    task_seconds: dict[tuple[str, int, str], float] = field(default_factory=dict)
    fills: dict[tuple[str, int], dict[str, dict[str, np.ndarray]]] = field(default_factory=dict)
    draws: list[tuple[str, int, np.ndarray]] = field(default_factory=list)
    held_out: dict[str, np.ndarray] = field(default_factory=dict)


def _score_task(
    working: pd.DataFrame,
    kinds: Mapping[str, str],
    hidden: np.ndarray,
    columns: Sequence[str],
    scales: Mapping[str, float],
    method: str,
    params: Mapping[str, Any],
    targets: Sequence[str],
    seed: int,
    keep: bool = False,
    blank: np.ndarray | None = None,
) -> tuple[list[dict[str, Any]], float, str | None, dict[str, np.ndarray] | None]:
    """Fit one method with ``blank`` (default: ``hidden``) missing; score it on ``hidden``."""
    with threadpool_limits(limits=1):
        start = time.perf_counter()
        masked = _masked(working, hidden if blank is None else blank, columns)
        try:
            estimator = get_method(method, **params)
            if "random_state" in estimator.get_params():
                estimator.set_params(random_state=seed)
            filled = estimator.fit_transform(with_derived(masked, kinds), list(targets))
        except Exception as exc:  # one method's failure is recorded; the grid goes on
            last = traceback.format_exception_only(type(exc), exc)[-1].strip()
            return [], time.perf_counter() - start, last, None
        seconds = time.perf_counter() - start
    # The fills of every empty cell (hidden or a real hole), for blends and benchmarks.
    fills = ({name: _values(filled[name])[masked[name].isna().to_numpy()] for name in targets}
             if keep else None)
    return _score_filled(working, filled, hidden, columns, scales, method, targets), seconds, \
        None, fills


def _masked(working: pd.DataFrame, hidden: np.ndarray, columns: Sequence[str]) -> pd.DataFrame:
    masked = working.copy()
    for j, name in enumerate(columns):
        rows = np.flatnonzero(hidden[:, j])
        if len(rows):
            column = masked[name].copy()
            column.iloc[rows] = np.nan
            masked[name] = column
    return masked


def _values(column: pd.Series) -> np.ndarray:
    """Numbers as float, labels as objects."""
    if is_categorical(column):
        return column.astype(object).to_numpy()
    return column.to_numpy(float)


def _score_filled(working: pd.DataFrame, filled: pd.DataFrame, hidden: np.ndarray,
                  columns: Sequence[str], scales: Mapping[str, float], method: str,
                  targets: Sequence[str]) -> list[dict[str, Any]]:
    """Every metric of every target column on the hidden cells of one filled frame."""
    numeric = [n for n in columns if not is_categorical(working[n])]
    rows_out = []
    for j, name in enumerate(columns):
        if name not in targets:
            continue
        cells = hidden[:, j]
        if not cells.any():  # e.g. a pattern mask replaying no hole in this column
            continue
        truth, guess = working[name][cells], filled[name][cells]
        if is_categorical(working[name]):
            record = score_cells("categorical", truth.astype(object).to_numpy(),
                                 guess.astype(object).to_numpy())
            record["distribution"] = record["total_variation"]
            record["balanced"] = 0.5 * (record["pfc"] + record["distribution"])
        else:
            record = score_cells("numeric", truth.to_numpy(float), guess.to_numpy(float),
                                 scales[name])
            record.update(_distribution_checks(working, filled, name, numeric, cells))
            # With no other numeric column there is no correlation to keep: distance alone.
            shift = record["corr_shift"]
            record["distribution"] = record["wasserstein"] + (shift if np.isfinite(shift) else 0)
            record["balanced"] = 0.5 * (record["nrmse"] + record["distribution"])
        record.update(column=name, method=method, n_hidden=int(cells.sum()))
        rows_out.append(record)
    return rows_out


@dataclass(frozen=True)
class _Shared:
    """The inputs every grid task reads."""

    working: pd.DataFrame
    kinds: Mapping[str, str]
    columns: Sequence[str]
    scales: Mapping[str, float]
    draws: Mapping[tuple[str, int], np.ndarray]  # hidden cells per (mask, repeat)
    held_out: Mapping[str, np.ndarray] = field(default_factory=dict)  # per mask


def _blank(held_out: Mapping[str, np.ndarray], mask_name: str, hidden: np.ndarray
           ) -> np.ndarray:
    """Cells missing in a draw's fit: its hidden cells and its mask's held-out cells."""
    held = held_out.get(mask_name)
    return hidden if held is None else hidden | held


def _grid_task(shared: _Shared, mask_name: str, repeat: int, method: str,
               params: Mapping[str, Any], targets: Sequence[str], seed: int, keep: bool
               ) -> tuple[list[dict[str, Any]], float, str | None, dict[str, np.ndarray] | None]:
    hidden = shared.draws[mask_name, repeat]
    return _score_task(shared.working, shared.kinds, hidden, shared.columns, shared.scales,
                       method, params, targets, seed, keep,
                       _blank(shared.held_out, mask_name, hidden))


def _distribution_checks(working: pd.DataFrame, filled: pd.DataFrame, name: str,
                         numeric: Sequence[str], cells: np.ndarray) -> dict[str, float]:
    """Variance ratio on the hidden cells, correlation shift over the whole column."""
    others = [n for n in numeric if n != name and n in filled.columns]
    shift = (correlation_shift(working[name].to_numpy(float), filled[name].to_numpy(float),
                               working[others].to_numpy(float), filled[others].to_numpy(float))
             if others else float("nan"))
    out = {
        "variance_ratio": variance_ratio(working[name][cells].to_numpy(float),
                                         filled[name][cells].to_numpy(float)),
        "corr_shift": shift,
    }
    return out


def run_experiment(
    working: pd.DataFrame,
    kinds: Mapping[str, str],
    columns: Sequence[str],
    *,
    methods: Mapping[str, Mapping[str, Any]],
    masks: Sequence[str] = ("mcar", "mar", "mnar"),
    rate: float = 0.2,
    repeats: int = 3,
    seed: int = 0,
    dtypes: Mapping[str, Any] | None = None,
    n_jobs: int = 1,
    progress: Callable[[int, int], None] | None = None,
    keep_fills: bool = False,
    executor: Executor | None = None,
    held_out: Mapping[str, np.ndarray] | None = None,
) -> ExperimentResult:
    """Score every method on every column under every mask.

    Parameters
    ----------
    working : DataFrame
        Working frame (see :mod:`imputelab.frame.encoding`) of the columns methods may use.
    kinds : mapping
        Kind of every working column.
    columns : sequence of str
        Columns to hide cells in and score.
    methods : mapping
        Method name to parameters.
    masks : sequence of str
        Mask names.
    rate : float
        Share of each column's observed cells to hide.
    repeats : int
        Fresh draws per mask.
    seed : int
        Root of every seed in the run.
    dtypes : mapping, optional
        The table's dtypes, for methods whose applicability depends on them.
    n_jobs : int
        Parallel tasks (joblib) when no ``executor`` is given; one BLAS thread per task.
    progress : callable, optional
        Called as ``progress(done, total)`` after each task.
    keep_fills : bool
        Keep every method's fills (:attr:`ExperimentResult.fills`).
    executor : Executor, optional
        Where the tasks run (:mod:`imputelab.executors.pool`); the scores do not depend on it.
    held_out : mapping, optional
        ``{mask: cells}``, boolean rows x ``columns`` arrays (see
        :func:`imputelab.score.heldout.draw_held_out`). A mask's held-out cells are missing in
        every fit of its draws (never training data) and none of its draws hides them, so
        they can later score the chosen method on cells no choice has seen.

    Returns
    -------
    ExperimentResult
    """
    columns = list(columns)
    held = dict(held_out or {})
    targets, skipped = _method_targets(working, kinds, columns, methods, dtypes or {})
    draws = draw_hidden(working, columns, masks, rate, repeats, seed, held_out=held)
    # What every task reads goes out once (scattered to a cluster's workers), not per task.
    shared = _Shared(working, kinds, columns, column_scales(working, columns),
                     {(mask_name, repeat): hidden for mask_name, repeat, hidden in draws}, held)
    crossfit = "blend" in methods and all(m in methods for m in COMPONENTS)
    tasks = _tasks(draws, methods, targets, seed, keep_fills, crossfit)
    executor = executor if executor is not None else JoblibExecutor(n_jobs)
    result = _collect(tasks, executor.map(_grid_task, shared, tasks, progress), methods)
    result.skipped, result.draws, result.held_out = skipped, draws, held
    result.hidden = {mask_name: {c: int(hidden[:, j].sum()) for j, c in enumerate(columns)}
                     for mask_name, repeat, hidden in draws if repeat == 0}
    if crossfit and targets["blend"]:
        _add_blend(result, shared, targets["blend"], keep_fills)
    result.scores = _tidy(result.scores)
    if not keep_fills:
        result.fills = {}
    return result


def _tasks(draws: Sequence[tuple[str, int, np.ndarray]], methods: Mapping[str, Any],
           targets: Mapping[str, list[str]], seed: int, keep_fills: bool, crossfit: bool
           ) -> list[tuple]:
    """One task per (draw, method); a cross-fitted blend needs no task of its own."""
    keep = set(methods) if keep_fills else set(COMPONENTS) if crossfit else set()
    return [(mask_name, repeat, method, methods[method], targets[method],
             derive_seed(seed, mask_name, repeat, method), method in keep)
            for mask_name, repeat, _ in draws for method in methods
            if targets[method] and not (crossfit and method == "blend")]


def _tidy(records: list[dict[str, Any]]) -> pd.DataFrame:
    scores = pd.DataFrame.from_records(records)
    if len(scores):
        front = ["column", "method", "mask", "repeat", "n_hidden"]
        scores = scores[front + [c for c in scores.columns if c not in front]]
    return scores


def _method_targets(working: pd.DataFrame, kinds: Mapping[str, str], columns: Sequence[str],
                    methods: Mapping[str, Any], dtypes: Mapping[str, Any]
                    ) -> tuple[dict[str, list[str]], dict[str, dict[str, str]]]:
    """The columns each method can fill, and why it cannot fill the others."""
    skipped: dict[str, dict[str, str]] = {}
    targets: dict[str, list[str]] = {}
    for method in methods:
        cls = get_method(method).__class__
        targets[method] = []
        for name in columns:
            n_labels = (len(working[name].cat.categories) if is_categorical(working[name])
                        else None)
            reason = cls.unsupported_reason(kinds[name], dtypes.get(name), n_labels)
            if reason:
                skipped.setdefault(name, {})[method] = reason
            else:
                targets[method].append(name)
    return targets, skipped


def column_scales(working: pd.DataFrame, columns: Sequence[str]) -> dict[str, float]:
    """Standard deviation (``ddof=0``) of each numeric column's observed values."""
    scales = {}
    for name in columns:
        if not is_categorical(working[name]):
            values = working[name].to_numpy(float)
            scales[name] = float(np.nanstd(values)) if np.isfinite(values).any() else np.nan
    return scales


def _collect(tasks: Sequence[tuple], results: Any, methods: Mapping[str, Any]
             ) -> ExperimentResult:
    """Gather the grid's results in task order; ``scores`` holds the records as a list."""
    out = ExperimentResult(scores=[], seconds=dict.fromkeys(methods, 0.0))  # type: ignore[arg-type]
    for (mask_name, repeat, method, *_), (rows, spent, error, kept) in zip(tasks, results,
                                                                            strict=True):
        out.seconds[method] += spent
        out.task_seconds[(mask_name, repeat, method)] = spent
        if error:
            out.failures.append({"method": method, "mask": mask_name, "repeat": repeat,
                                 "error": error})
        if kept is not None:
            out.fills.setdefault((mask_name, repeat), {})[method] = kept
        for row in rows:
            row.update(mask=mask_name, repeat=repeat)
            out.scores.append(row)
    return out


def _add_blend(result: ExperimentResult, shared: _Shared, targets: Sequence[str],
               keep_fills: bool) -> None:
    """Score the cross-fitted blend on every draw from its components' kept fills."""
    working, columns = shared.working, list(shared.columns)
    result.blend = _crossfit_blend(working, columns, shared.scales, result.draws,
                                   result.fills, targets, shared.held_out)
    for mask_name, repeat, hidden in result.draws:
        entry = result.blend["draws"].get(f"{mask_name}/{repeat}")
        if entry is None:
            continue
        blank = _blank(shared.held_out, mask_name, hidden)
        filled = _blended(working, columns, blank, result.fills[(mask_name, repeat)],
                          targets, entry)
        for row in _score_filled(working, filled, hidden, columns, shared.scales, "blend",
                                 targets):
            row.update(mask=mask_name, repeat=repeat)
            result.scores.append(row)
        spent = sum(result.task_seconds[(mask_name, repeat, m)] for m in COMPONENTS)
        result.seconds["blend"] += spent
        result.task_seconds[(mask_name, repeat, "blend")] = spent
        if keep_fills:
            empty = _masked(working, blank, columns)
            result.fills[(mask_name, repeat)]["blend"] = {
                n: _values(filled[n])[empty[n].isna().to_numpy()] for n in targets}


def draw_hidden(working: pd.DataFrame, columns: Sequence[str], masks: Sequence[str],
                rate: float, repeats: int, seed: int,
                held_out: Mapping[str, np.ndarray] | None = None
                ) -> list[tuple[str, int, np.ndarray]]:
    """The hidden cells of every (mask, repeat) draw, seeded by ``(seed, mask, repeat)``.

    Each mask draws on the whole frame, as it would without held-out cells, and then gives
    up the cells of its ``held_out`` array: a draw never hides a held-out cell.
    """
    draws = []
    held_out = held_out or {}
    for mask_name in masks:
        mask = get_mask(mask_name)
        for repeat in range(repeats):
            rng = np.random.default_rng(derive_seed(seed, mask_name, repeat))
            hidden = mask.sample(working, list(columns), rate, rng)
            if mask_name in held_out:
                hidden = hidden & ~held_out[mask_name]
            draws.append((mask_name, repeat, hidden))
    return draws


def _holes(working: pd.DataFrame, hidden: np.ndarray, j: int, name: str) -> np.ndarray:
    """Cells of a column empty after masking: hidden ones and real holes."""
    return hidden[:, j] | working[name].isna().to_numpy()


def _crossfit_blend(working: pd.DataFrame, columns: Sequence[str],
                    scales: Mapping[str, float], draws: list[tuple[str, int, np.ndarray]],
                    fills: Mapping[tuple[str, int], Mapping[str, Mapping[str, np.ndarray]]],
                    targets: Sequence[str],
                    held_out: Mapping[str, np.ndarray] | None = None) -> dict[str, Any]:
    """Blend weights for every draw from the other draws, and from all draws for the plan."""
    complete = [d for d in draws if all(m in fills.get((d[0], d[1]), {}) for m in COMPONENTS)]
    index = {name: j for j, name in enumerate(columns)}

    def fit(used: list[tuple[str, int, np.ndarray]], exclude: np.ndarray | None) -> dict:
        truth: dict[str, list] = {n: [] for n in targets}
        guesses: dict[str, dict[str, list]] = {n: {m: [] for m in COMPONENTS} for n in targets}
        for mask_name, repeat, hidden in used:
            for name in targets:
                j = index[name]
                holes = np.flatnonzero(_holes(working, _blank(held_out or {}, mask_name,
                                                              hidden), j, name))
                pick = hidden[holes, j]  # the draw's hidden cells, never held-out ones
                if exclude is not None:
                    pick &= ~exclude[holes, j]
                truth[name].append(_values(working[name])[holes[pick]])
                for m in COMPONENTS:
                    guesses[name][m].append(fills[(mask_name, repeat)][m][name][pick])
        truth_all = {n: np.concatenate(v) for n, v in truth.items() if v}
        guess_all = {n: {m: np.concatenate(g[m]) for m in COMPONENTS}
                     for n, g in guesses.items() if truth[n]}
        numeric = {n: scales[n] for n in truth_all if n in scales}
        weights, labels = fit_blend(truth_all, guess_all, numeric)
        return {"weights": weights, "label_method": labels}

    per_draw = {}
    equal = {"weights": {m: 1 / len(COMPONENTS) for m in COMPONENTS}, "label_method": None}
    for draw in complete:
        others = [d for d in complete if d is not draw]
        # A lone draw has nothing to fit on: the plain average (no weights are learnt).
        per_draw[f"{draw[0]}/{draw[1]}"] = fit(others, draw[2]) if others else equal
    overall = fit(complete, None) if complete else {}
    return {**overall, "draws": per_draw}


def _blended(working: pd.DataFrame, columns: Sequence[str], blank: np.ndarray,
             fills: Mapping[str, Mapping[str, np.ndarray]], targets: Sequence[str],
             entry: Mapping[str, Any]) -> pd.DataFrame:
    """The blend's filled frame of one draw (``blank``: its fit's empty cells)."""
    filled = _masked(working, blank, columns)
    weights, labels = entry["weights"], entry["label_method"]
    for name in targets:
        j = columns.index(name)
        holes = np.flatnonzero(_holes(working, blank, j, name))
        column = filled[name].copy()
        if is_categorical(working[name]):
            column.iloc[holes] = fills[labels or max(weights, key=weights.get)][name]
        else:
            column.iloc[holes] = sum(w * fills[m][name] for m, w in weights.items())
        filled[name] = column
    return filled
