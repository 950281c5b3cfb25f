"""``bench``: every method, the chosen plan and scikit-learn's imputers on open datasets.

For each dataset (see :mod:`imputelab.bench.datasets`) the benchmark takes the rows complete over
its benchmark columns, then:

1. **hides cells** under each mask, ``repeats`` times (the experiment's seeds
   ``(seed, mask, repeat)``), and fills the same hidden cells with every imputelab method
   (:func:`imputelab.score.experiment.run_experiment`) and with the scikit-learn references of
   :data:`REFERENCES`;
2. **chooses a plan for each of those draws** with :func:`imputelab.score.build.score_table`
   on the complete rows with that draw's hidden cells blank (seed derived from
   ``(seed, "selection", mask, repeat)``), and fills the draw with it: each column takes its
   chosen method's fill of that draw from step 1 (a ``blend`` column combines the draw's
   component fills with the plan's weights, which ``score`` fitted on its own draws).

   What holds: ``score``'s own masks hide only cells observed in the table it reads, so no
   cell a draw is scored on is hidden or scored by the choice of its plan, and its value is
   not in the table that choice reads. What does not: the cells other scored draws hide are
   observed in that table (each draw is judged on its own cells only), and the methods of
   step 1, like the references, fit on the draw's masked table;
3. for the ``gaussian`` set, computes the Bayes floor: the conditional mean of the hidden
   entries given the observed ones under the known parameters (Anderson 2003, *An
   Introduction to Multivariate Statistical Analysis*, 3rd ed., Theorem 2.5.1).

Every grid (the methods' draws, the references' draws, each ``score`` run) runs on one
executor (:mod:`imputelab.executors.pool`), so a Dask cluster runs them all.

Errors are NRMSE (numeric columns, mean over columns) and the proportion of falsely
classified labels (label columns, mean over columns), each with its standard error over the
repeats. The references see a numeric design: numbers standardised with the masked table's
observed mean and standard deviation, labels one-hot (a hole is a row of NaN over its block;
the fill is the label of the largest filled dummy); ``simple`` takes the mean of numbers and
the most frequent label.
"""

from __future__ import annotations

import math
import os
import platform
import tempfile
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from imputelab.bench.datasets import Dataset, dataset_names, gaussian_parameters, load_dataset
from imputelab.bench.options import BAYES, PLAN, BenchOptions
from imputelab.bench.references import (
    REFERENCES,
    SPEED_REFERENCE,
    bayes_floor_fill,
    reference_fill,
)
from imputelab.bench.selection import Prepared, choose_plans, plan_fill, prepare
from imputelab.bench.writing import plain_data, results_markdown, write_bench
from imputelab.executors.pool import Executor, JoblibExecutor
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import is_categorical
from imputelab.methods import get_method_names
from imputelab.methods.blend import COMPONENTS
from imputelab.metrics.scores import nrmse, pfc
from imputelab.score.experiment import ExperimentResult, run_experiment
from imputelab.score.plan import Plan

__all__ = ["BAYES", "PLAN", "REFERENCES", "BenchOptions", "bayes_floor_fill", "plain_data",
           "results_markdown", "run_bench", "write_bench"]


def _errors(working: pd.DataFrame, columns: list[str], hidden: np.ndarray,
            fills: Mapping[str, np.ndarray], scales: Mapping[str, float]) -> dict[str, float]:
    """Mean NRMSE over numeric columns and mean PFC over label columns of one fill."""
    numeric, labels = [], []
    for j, name in enumerate(columns):
        cells = hidden[:, j]
        if not cells.any() or name not in fills:
            continue
        truth = working[name][cells]
        if is_categorical(working[name]):
            labels.append(pfc(truth.astype(object).to_numpy(), fills[name]))
        else:
            numeric.append(nrmse(truth.to_numpy(float), np.asarray(fills[name], float),
                                 scales[name]))
    return {"nrmse": float(np.mean(numeric)) if numeric else math.nan,
            "pfc": float(np.mean(labels)) if labels else math.nan}


@dataclass(frozen=True)
class _Draws:
    """What every reference task reads: the complete rows and every scored draw."""

    working: pd.DataFrame
    columns: list[str]
    hidden: Mapping[tuple[str, int], np.ndarray]


def _reference_grid(shared: _Draws, mask: str, repeat: int, name: str,
                    seed: int) -> tuple[dict[str, np.ndarray], float]:
    return reference_fill(shared.working, shared.hidden[mask, repeat], shared.columns, name,
                           seed)


def _reference_errors(prepared: Prepared, result: ExperimentResult, options: BenchOptions,
                      scales: Mapping[str, float], executor: Executor,
                      progress: Callable[[int, int], None]
                      ) -> dict[tuple[str, int], dict[str, dict[str, float]]]:
    """Every scikit-learn reference's errors and seconds on every scored draw."""
    working, columns = prepared.working, prepared.columns
    shared = _Draws(working, columns, {(m, r): h for m, r, h in result.draws})
    tasks = [(mask, repeat, ref, derive_seed(options.seed, mask, repeat, ref))
             for mask, repeat, _ in result.draws for ref in REFERENCES]
    per_draw: dict[tuple[str, int], dict[str, dict[str, float]]] = {}
    for (mask, repeat, ref, _), (fills, seconds) in zip(
            tasks, executor.map(_reference_grid, shared, tasks, progress), strict=True):
        per_draw.setdefault((mask, repeat), {})[ref] = {
            **_errors(working, columns, shared.hidden[mask, repeat], fills, scales),
            "seconds": seconds}
    return per_draw


def _method_errors(prepared: Prepared, result: ExperimentResult, mask: str, repeat: int,
                   hidden: np.ndarray, scales: Mapping[str, float]) -> dict[str, dict]:
    """Every imputelab method's errors and seconds on one scored draw."""
    working, columns = prepared.working, prepared.columns
    entry = {}
    draw_fills = result.fills.get((mask, repeat), {})
    for method in get_method_names():
        fills = draw_fills.get(method)
        if fills is None:
            continue
        pick = {n: fills[n][hidden[np.flatnonzero(hidden[:, j] | working[n].isna()
                                                   .to_numpy()), j]]
                for j, n in enumerate(columns) if n in fills}
        entry[method] = {**_errors(working, columns, hidden, pick, scales),
                         "seconds": result.task_seconds.get((mask, repeat, method), 0.0)}
    return entry


def _floor_errors(prepared: Prepared, hidden: np.ndarray,
                  scales: Mapping[str, float]) -> dict[str, float]:
    """The Bayes floor's errors on one draw of the ``gaussian`` set."""
    working, columns = prepared.working, prepared.columns
    mean, cov = gaussian_parameters()
    floor = bayes_floor_fill(working[columns].to_numpy(float), hidden, mean, cov)
    fills = {n: floor[hidden[:, j], j] for j, n in enumerate(columns)}
    return {**_errors(working, columns, hidden, fills, scales), "seconds": 0.0}


def _bench_dataset(dataset: Dataset, options: BenchOptions, tmp: Path, executor: Executor,
                   progress: Callable[[str, int, int], None]) -> dict[str, Any]:
    prepared = prepare(dataset, options, tmp)
    working, columns = prepared.working, prepared.columns
    methods = {m: {} for m in get_method_names()}
    result = run_experiment(working, prepared.kinds, columns, methods=methods,
                            masks=list(options.masks), rate=options.rate,
                            repeats=options.repeats, seed=options.seed, n_jobs=options.n_jobs,
                            keep_fills=True, executor=executor,
                            progress=lambda d, t: progress("imputelab methods", d, t))
    scales = {n: float(np.nanstd(working[n].to_numpy(float))) for n in columns
              if not is_categorical(working[n])}
    per_draw = _reference_errors(prepared, result, options, scales, executor,
                                 lambda d, t: progress("scikit-learn references", d, t))
    plans: dict[str, dict[str, Plan]] = {}
    score_seconds = 0.0
    for i, (mask, repeat, hidden) in enumerate(result.draws, start=1):
        key = f"{mask}/{repeat}"
        plans[key], seconds = choose_plans(
            dataset, prepared, options, (mask, repeat, hidden), tmp, executor,
            lambda d, t, i=i: progress(f"choosing plan {i} of {len(result.draws)}", d, t))
        score_seconds += seconds
        entry = per_draw.setdefault((mask, repeat), {})
        entry.update(_method_errors(prepared, result, mask, repeat, hidden, scales))
        for label, chosen in plans[key].items():
            fills, spent = plan_fill(chosen, result, working, columns, mask, repeat, hidden)
            entry[label] = {**_errors(working, columns, hidden, fills, scales),
                            "seconds": spent}
        if dataset.name == "gaussian":
            entry[BAYES] = _floor_errors(prepared, hidden, scales)
    masks_out = {mask: _summarise({r: per_draw[(mask, r)] for r in range(options.repeats)})
                 for mask in options.masks}
    return {
        "rows_complete": prepared.rows_complete,
        "rows_used": len(prepared.used),
        "note": dataset.note,
        "columns": {n: prepared.kinds[n] for n in columns},
        "plans": {key: {n: p[PLAN].columns[n].method for n in columns}
                  for key, p in plans.items()},
        "plan_rule": next(iter(plans.values()))[PLAN].settings.get("choice_rule"),
        "other_rules": {key: {label: {n: p.columns[n].method for n in columns}
                              for label, p in chosen.items() if label != PLAN}
                        for key, chosen in plans.items()},
        "plan_blend": {key: _blend_params(p[PLAN], columns) for key, p in plans.items()
                       if _blend_params(p[PLAN], columns) is not None},
        "plan_score_seconds": round(score_seconds, 2),
        "experiment_blend_weights": result.blend.get("weights"),
        "failures": result.failures,
        "masks": masks_out,
    }


def _blend_params(plan: Plan, columns: Sequence[str]) -> dict[str, Any] | None:
    """The blend weights and label method of a plan that blends some column, else None."""
    return next(({"weights": plan.columns[n].params.get("weights"),
                  "label_method": plan.columns[n].params.get("label_method")}
                 for n in columns if plan.columns[n].method == "blend"), None)


def _mean_se(values: list[float]) -> tuple[float, float]:
    array = np.asarray(values, float)
    array = array[np.isfinite(array)]
    if not len(array):
        return math.nan, math.nan
    se = float(array.std(ddof=1) / math.sqrt(len(array))) if len(array) > 1 else math.nan
    return float(array.mean()), se


def _summarise(draws: Mapping[int, Mapping[str, Mapping[str, float]]]) -> dict[str, Any]:
    """Means and SEs over repeats, the best reference, and the ratios."""
    names = list(dict.fromkeys(m for entry in draws.values() for m in entry))
    methods = {}
    for name in names:
        rows = [draws[r][name] for r in draws if name in draws[r]]
        stats = {}
        for key in ("nrmse", "pfc", "seconds"):
            mean, se = _mean_se([row[key] for row in rows])
            stats[key], stats[f"{key}_se"] = mean, se
        methods[name] = stats
    out: dict[str, Any] = {"methods": methods}
    for key in ("nrmse", "pfc"):
        refs = {r: methods[r][key] for r in REFERENCES
                if r in methods and math.isfinite(methods[r][key])}
        if not refs:
            continue
        best = min(refs, key=refs.get)
        out[f"best_reference_{key}"] = best
        for stats in methods.values():
            if math.isfinite(stats[key]) and refs[best] > 0:
                stats[f"{key}_ratio"] = stats[key] / refs[best]
    speed = methods.get(SPEED_REFERENCE, {}).get("seconds")
    if speed:
        for stats in methods.values():
            stats["seconds_ratio"] = stats["seconds"] / speed
    if BAYES in methods:
        floor = methods[BAYES]["nrmse"]
        for stats in methods.values():
            stats["bayes_ratio"] = stats["nrmse"] / floor
    return out


# -- the run -------------------------------------------------------------------------------
def run_bench(options: BenchOptions,
              progress: Callable[[str, int, int], None] | None = None,
              note: Callable[[str], None] | None = None,
              done: Callable[[dict[str, Any]], None] | None = None,
              executor: Executor | None = None) -> dict[str, Any]:
    """Run the benchmark; the results as plain data (see :func:`write_bench`).

    Parameters
    ----------
    options : BenchOptions
    progress : callable, optional
        ``progress(stage, done, total)`` after each task of a stage.
    note : callable, optional
        Called with one line when a dataset is skipped or finished.
    done : callable, optional
        Called with the results so far after each dataset (e.g. to write them).
    executor : Executor, optional
        Where the grids run (:mod:`imputelab.executors.pool`; e.g. a Dask cluster): the
        methods' experiment, the references and every ``score`` run that chooses a plan. By
        default ``options.n_jobs`` local processes. The results do not depend on it.
    """
    options.validate()
    executor = executor or JoblibExecutor(options.n_jobs)
    progress = progress or (lambda stage, done, total: None)
    note = note or (lambda line: None)
    names = list(options.datasets or dataset_names())
    results: dict[str, Any] = {
        "settings": {"datasets": names, "masks": list(options.masks), "rate": options.rate,
                     "repeats": options.repeats, "seed": options.seed,
                     "selection_repeats": options.selection_repeats,
                     "max_rows": options.max_rows, "n_jobs": options.n_jobs,
                     "references": dict(REFERENCES), "speed_reference": SPEED_REFERENCE,
                     "components": list(COMPONENTS)},
        "machine": {"cores": os.cpu_count(), "python": platform.python_version(),
                    "platform": platform.platform()},
        "datasets": {}, "skipped": {},
    }
    start = time.perf_counter()
    with tempfile.TemporaryDirectory() as tmp:
        for name in names:
            dataset = load_dataset(name, california=options.california)
            if dataset.frame.empty:
                results["skipped"][name] = dataset.note
                note(f"{name}: {dataset.note}")
                continue
            began = time.perf_counter()
            results["datasets"][name] = _bench_dataset(
                dataset, options, Path(tmp), executor,
                lambda stage, done, total, n=name: progress(f"{n}: {stage}", done, total))
            results["datasets"][name]["seconds"] = round(time.perf_counter() - began, 1)
            note(_one_line(name, results["datasets"][name]))
            if done is not None:
                done({**results, "seconds": round(time.perf_counter() - start, 1),
                      "partial": True})
    results["seconds"] = round(time.perf_counter() - start, 1)
    return results


def _one_line(name: str, entry: Mapping[str, Any]) -> str:
    parts = []
    for mask, summary in entry["masks"].items():
        plan = summary["methods"].get(PLAN, {})
        ratio = plan.get("nrmse_ratio", plan.get("pfc_ratio", math.nan))
        parts.append(f"{mask} plan/best ref {ratio:.3f}")
    return f"{name}: {', '.join(parts)} ({entry['seconds']:.0f} s)"
