"""The held-out figure: the chosen method's error on cells no choice has seen.

The experiment's scores choose the methods (and the blend's weights), so the chosen method's
score there is the best of several noisy figures and flatters it. Before the experiment, each
mask draws one more set of hidden cells, the *held-out* cells ``H`` (seeded by
``derive_seed(seed, "held-out", mask)``, at the experiment's rate). They are missing in every
fit of that mask's selection draws and hidden by none of them
(:func:`imputelab.score.experiment.run_experiment`), so no choice rule, no blend weight and no
selection model sees their values. Once the plan is chosen, every chosen method is fitted
once per mask on the table with only ``H`` missing and scored on ``H``: that score is the
column's ``expected_error``, the mean over masks, with the standard error over masks when
there are at least two.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from imputelab.executors.pool import Executor, JoblibExecutor
from imputelab.executors.seeds import derive_seed
from imputelab.masks import get_mask
from imputelab.score.experiment import _grid_task, _method_targets, _Shared, column_scales

__all__ = ["draw_held_out", "expected_errors"]


def draw_held_out(working: pd.DataFrame, columns: Sequence[str], masks: Sequence[str],
                  rate: float, seed: int) -> dict[str, np.ndarray]:
    """One set of held-out cells per mask, boolean rows x ``columns``."""
    out = {}
    for mask_name in masks:
        rng = np.random.default_rng(derive_seed(seed, "held-out", mask_name))
        out[mask_name] = get_mask(mask_name).sample(working, list(columns), rate, rng)
    return out


def expected_errors(
    working: pd.DataFrame,
    kinds: Mapping[str, str],
    columns: Sequence[str],
    held_out: Mapping[str, np.ndarray],
    chosen: Mapping[str, tuple[str, Mapping[str, Any]]],
    metrics: Mapping[str, str],
    *,
    seed: int,
    dtypes: Mapping[str, Any] | None = None,
    n_jobs: int = 1,
    executor: Executor | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> dict[str, dict[str, Any] | None]:
    """Score each column's chosen method on its held-out cells.

    Parameters
    ----------
    working : DataFrame
        The experiment's working frame, with the truth of the held-out cells.
    kinds : mapping
    columns : sequence of str
        The experiment's columns, in the order of the ``held_out`` arrays.
    held_out : mapping
        ``{mask: cells}`` from :func:`draw_held_out`.
    chosen : mapping
        ``{column: (method, params)}``: the plan's choice for each column to score. Columns
        that chose the same method with the same parameters share one fit per mask.
    metrics : mapping
        ``{column: metric}``, the score to report (a key of the experiment's records).
    seed : int
    dtypes, n_jobs, executor, progress
        As for :func:`imputelab.score.experiment.run_experiment`.

    Returns
    -------
    dict
        ``{column: {"metric", "score", "se", "draws"}}``, ``se`` None with one mask; None
        for a column no held-out fit could score.
    """
    columns = list(columns)
    groups: dict[str, tuple[str, Mapping[str, Any], list[str]]] = {}
    for name, (method, params) in chosen.items():
        key = f"{method} {sorted(params.items())!r}"
        groups.setdefault(key, (method, params, []))[2].append(name)
    fillable, _ = _method_targets(working, kinds, columns,
                                  {g[0]: {} for g in groups.values()}, dtypes or {})
    tasks = [(mask_name, 0, method, dict(params), fillable[method],
              derive_seed(seed, "held-out", mask_name, method), False)
             for mask_name in held_out for method, params, _ in groups.values()
             if fillable[method]]
    shared = _Shared(working, kinds, columns, column_scales(working, columns),
                     {(mask_name, 0): cells for mask_name, cells in held_out.items()})
    executor = executor if executor is not None else JoblibExecutor(n_jobs)
    found: dict[str, list[float]] = {name: [] for name in chosen}
    results = executor.map(_grid_task, shared, tasks, progress)
    for (_, _, method, params, *_), (rows, _, _, _) in zip(tasks, results, strict=True):
        owners = next(g[2] for g in groups.values() if g[0] == method and g[1] == params)
        for row in rows:
            value = row.get(metrics.get(row["column"], ""))
            if row["column"] in owners and value is not None and math.isfinite(value):
                found[row["column"]].append(float(value))
    return {name: _summary(metrics[name], values) for name, values in found.items()}


def _summary(metric: str, values: list[float]) -> dict[str, Any] | None:
    if not values:
        return None
    spread = np.asarray(values)
    se = float(spread.std(ddof=1) / math.sqrt(len(values))) if len(values) > 1 else None
    return {"metric": metric, "score": float(spread.mean()), "se": se, "draws": len(values)}
