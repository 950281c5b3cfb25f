"""``bench``: every method, the chosen plan and scikit-learn's imputers on open datasets.

For each dataset (see :mod:`imputelab.bench.datasets`) the benchmark takes the rows complete over
its benchmark columns, then:

1. **hides cells** under each mask, ``repeats`` times (the experiment's seeds
   ``(seed, mask, repeat)``), and fills the same hidden cells with every imputelab method
   (:func:`imputelab.score.experiment.run_experiment`) and with the scikit-learn references of
   :data:`REFERENCES`;
2. **chooses a plan for each of those draws** with :func:`imputelab.score.build.score_table`
   on the complete rows with that draw's hidden cells blank (seed derived from
   ``(seed, "selection", mask, repeat)``). ``score``'s own masks hide only cells that are
   still observed, so the cells a plan is scored on are never among the cells its choice was
   scored on, and their values are not in the table it was chosen on; other draws' scored
   cells may be, as they are other cells. The plan's fill of the draw is each column's chosen
   method's fill of that draw from step 1 (a ``blend`` column combines the draw's component
   fills with the plan's weights, which ``score`` fitted on its own draws). The methods fitted
   in step 1 fit on the same masked table as the references; only the choice is made apart;
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

import json
import math
import os
import platform
import tempfile
import time
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from imputelab.bench.datasets import Dataset, dataset_names, gaussian_parameters, load_dataset
from imputelab.errors import OptionError
from imputelab.executors.pool import Executor, JoblibExecutor
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import is_categorical
from imputelab.frame.setup import default_action, working_setup
from imputelab.io.tables import atomic_path, read_table
from imputelab.masks import get_mask_names
from imputelab.methods import get_method_names
from imputelab.methods.blend import COMPONENTS
from imputelab.metrics.scores import nrmse, pfc
from imputelab.score.build import CHOICE_RULES, ScoreOptions, plan_from_experiment, score_table
from imputelab.score.experiment import ExperimentResult, run_experiment
from imputelab.score.plan import Plan
from imputelab.survey.table import SurveyOptions, survey_table

__all__ = ["REFERENCES", "BenchOptions", "bayes_floor_fill", "plain_data", "run_bench",
           "write_bench"]

DEFAULT_MASKS = ("mcar", "mar")
PLAN = "plan"
BAYES = "bayes-floor"
#: scikit-learn references, by the name the report gives them.
REFERENCES = {
    "sk-simple": "SimpleImputer(mean; most_frequent for labels)",
    "sk-knn": "KNNImputer(n_neighbors=5) on standardised numbers and one-hot labels",
    "sk-iter-bayes": "IterativeImputer(BayesianRidge())",
    "sk-iter-forest": "IterativeImputer(RandomForestRegressor(n_estimators=100))",
}
SPEED_REFERENCE = "sk-iter-forest"
#: References that see a label column as one column of integer codes (the most frequent code
#: for the simple one; trees split codes as they split numbers, and one column instead of a
#: block of dummies keeps the forest reference's cost down). The others see one-hot blocks.
ORDINAL = ("sk-simple", "sk-iter-forest")


@dataclass
class BenchOptions:
    """Settings of a benchmark run.

    Attributes
    ----------
    datasets : sequence of str, optional
        Dataset names (default: every meta file).
    masks : sequence of str
    rate : float
    repeats : int
        Scored draws per mask.
    seed : int
    california : path, optional
        The California housing CSV.
    selection_repeats : int
        Draws per mask of the plan's own ``score`` run.
    max_rows : int, optional
        Cap on the complete rows used per dataset (a seeded sample); a meta file's
        ``[bench] max_rows`` applies when it is smaller.
    n_jobs : int
    """

    datasets: Sequence[str] | None = None
    masks: Sequence[str] = DEFAULT_MASKS
    rate: float = 0.2
    repeats: int = 5
    seed: int = 0
    california: Path | None = None
    selection_repeats: int = 3
    max_rows: int | None = None
    n_jobs: int = 1

    def validate(self) -> None:
        """Check names and ranges; raise :class:`OptionError`."""
        known = dataset_names()
        for name in self.datasets or ():
            if name not in known:
                raise OptionError(f"--datasets: unknown dataset '{name}'; choose from: "
                                  f"{', '.join(known)}")
        if self.datasets is not None and not self.datasets:
            raise OptionError("--datasets: give at least one dataset")
        if not self.masks:
            raise OptionError("--masks: give at least one mask")
        for name in self.masks:
            if name not in get_mask_names() or name == "pattern":
                raise OptionError(f"--masks: '{name}' is not a mask the benchmark can use; "
                                  "choose from: mar, mcar, mnar (complete rows have no "
                                  "holes for pattern to replay)")
        if not 0.0 < self.rate < 1.0:
            raise OptionError(f"--rate must be strictly between 0 and 1, got {self.rate}")
        if self.repeats < 1:
            raise OptionError(f"--repeats must be at least 1, got {self.repeats}")
        if self.selection_repeats < 1:
            raise OptionError("--selection-repeats must be at least 1")
        if self.max_rows is not None and self.max_rows < 50:
            raise OptionError(f"--max-rows must be at least 50, got {self.max_rows}")
        if self.seed < 0:
            raise OptionError(f"--seed must be 0 or more, got {self.seed}")


# -- the references ------------------------------------------------------------------------
def _reference(name: str, seed: int) -> Any:
    from sklearn.ensemble import RandomForestRegressor
    from sklearn.experimental import enable_iterative_imputer  # noqa: F401
    from sklearn.impute import IterativeImputer, KNNImputer, SimpleImputer
    from sklearn.linear_model import BayesianRidge

    if name == "sk-simple":
        return SimpleImputer(strategy="mean")
    if name == "sk-knn":
        return KNNImputer(n_neighbors=5)
    if name == "sk-iter-bayes":
        return IterativeImputer(BayesianRidge(), random_state=seed)
    if name == "sk-iter-forest":
        return IterativeImputer(RandomForestRegressor(n_estimators=100, random_state=seed,
                                                      n_jobs=1), random_state=seed)
    raise OptionError(f"unknown reference '{name}'")


def _reference_task(working: pd.DataFrame, hidden: np.ndarray, columns: list[str],
                    name: str, seed: int) -> tuple[dict[str, np.ndarray], float]:
    """Fill one draw's hidden cells with one reference; the fills and the seconds."""
    with threadpool_limits(limits=1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        start = time.perf_counter()
        blocks, numbers, labels = [], {}, {}
        for j, col in enumerate(columns):
            values = working[col]
            if is_categorical(values):
                codes = values.cat.codes.to_numpy().copy()
                codes[hidden[:, j]] = -1
                labels[col] = (len(blocks), codes, len(values.cat.categories))
                if name in ORDINAL:
                    blocks.append(np.where(codes >= 0, codes, np.nan)[:, None].astype(float))
                else:
                    block = np.zeros((len(codes), len(values.cat.categories)))
                    block[np.flatnonzero(codes >= 0), codes[codes >= 0]] = 1.0
                    block[codes < 0] = np.nan
                    blocks.append(block)
            else:
                x = values.to_numpy(float).copy()
                x[hidden[:, j]] = np.nan
                mean, sd = float(np.nanmean(x)), float(np.nanstd(x)) or 1.0
                numbers[col] = (len(blocks), mean, sd)
                blocks.append(((x - mean) / sd)[:, None])
        widths = [b.shape[1] for b in blocks]
        starts = np.concatenate([[0], np.cumsum(widths)])
        matrix = np.hstack(blocks)
        if name == "sk-simple":
            from sklearn.impute import SimpleImputer

            label_cols = [starts[labels[c][0]] for c in labels]
            out = matrix.copy()
            number_cols = [i for i in range(matrix.shape[1]) if i not in label_cols]
            for cols, strategy in ((number_cols, "mean"), (label_cols, "most_frequent")):
                if cols:
                    out[:, cols] = SimpleImputer(strategy=strategy).fit_transform(
                        matrix[:, cols])
        else:
            out = _reference(name, seed).fit_transform(matrix)
        fills = {}
        for j, col in enumerate(columns):
            rows = hidden[:, j]
            if col in numbers:
                i, mean, sd = numbers[col]
                fills[col] = out[rows, starts[i]] * sd + mean
            else:
                i, _, n_labels = labels[col]
                if name in ORDINAL:
                    codes = np.clip(out[rows, starts[i]].round(), 0, n_labels - 1).astype(int)
                else:
                    codes = np.argmax(out[rows, starts[i]:starts[i] + n_labels], axis=1)
                fills[col] = np.asarray(working[col].cat.categories, dtype=object)[codes]
        return fills, time.perf_counter() - start


def bayes_floor_fill(values: np.ndarray, hidden: np.ndarray, mean: np.ndarray,
                     cov: np.ndarray) -> np.ndarray:
    """The conditional mean of every hidden entry given the row's observed entries.

    ``E[x_m | x_o] = mu_m + S_mo S_oo^-1 (x_o - mu_o)`` for a normal with mean ``mu`` and
    covariance ``S`` (Anderson 2003, Theorem 2.5.1); a row with nothing observed gets ``mu``.

    Returns
    -------
    ndarray
        ``values`` with the hidden entries replaced.
    """
    out = np.array(values, dtype=float, copy=True)
    patterns: dict[bytes, list[int]] = {}
    for i, row in enumerate(hidden):
        if row.any():
            patterns.setdefault(row.tobytes(), []).append(i)
    for key, rows in patterns.items():
        m = np.frombuffer(key, dtype=bool)
        o = ~m
        x = out[rows]
        if o.any():
            gain = np.linalg.solve(cov[np.ix_(o, o)], cov[np.ix_(o, m)])  # S_oo^-1 S_om
            x[:, m] = mean[m] + (x[:, o] - mean[o]) @ gain
        else:
            x[:, m] = mean[m]
        out[rows] = x
    return out


# -- one dataset ---------------------------------------------------------------------------
@dataclass
class _Prepared:
    used: pd.DataFrame  # the complete rows the benchmark uses, as loaded
    working: pd.DataFrame
    kinds: dict[str, str]
    columns: list[str]
    rows_complete: int


def _prepare(dataset: Dataset, options: BenchOptions, tmp: Path) -> _Prepared:
    """The complete rows (a seeded sample under a cap), read and encoded as ``score`` would."""
    complete = dataset.complete()
    cap = min([c for c in (options.max_rows, dataset.meta.get("bench", {}).get("max_rows"))
               if c is not None], default=None)
    used = complete
    if cap is not None and len(complete) > cap:
        rng = np.random.default_rng(derive_seed(options.seed, "rows", dataset.name))
        used = complete.iloc[np.sort(rng.choice(len(complete), cap, replace=False))]
        used = used.reset_index(drop=True)
    path = tmp / f"{dataset.name}.csv"
    used.to_csv(path, index=False)
    survey = survey_table(read_table(path), SurveyOptions(kinds=dataset.kinds, diagnostics=False))
    actions = {n: default_action(c.spec.kind, drop=c.drop, is_target=False)
               for n, c in survey.columns.items()}
    targets, encoding = working_setup(survey.typed, survey.specs, actions)
    return _Prepared(used=used, working=encoding.encode(survey.typed),
                     kinds=dict(encoding.kinds), columns=targets, rows_complete=len(complete))


def _selection_table(prepared: _Prepared, hidden: np.ndarray, path: Path) -> Path:
    """The complete rows with one scored draw's hidden cells blank, as a CSV file."""
    frame = prepared.used.copy()
    for j, name in enumerate(prepared.columns):
        rows = np.flatnonzero(hidden[:, j])
        if len(rows):
            column = frame[name].astype(object)
            column.iloc[rows] = None
            frame[name] = column
    frame.to_csv(path, index=False)
    return path


def _choose_plans(dataset: Dataset, prepared: _Prepared, options: BenchOptions,
                  draw: tuple[str, int, np.ndarray], tmp: Path, executor: Executor,
                  progress: Callable[[int, int], None] | None
                  ) -> tuple[dict[str, Plan], float]:
    """The plans ``score`` makes for one scored draw, on a table where its cells are blank.

    The scored cells are holes of that table, and ``score``'s own masks hide only observed
    cells, so no cell the plan is scored on is hidden, filled or seen by the choice. Returns
    the default plan under :data:`PLAN` and, from the same experiment, the plans the other
    choice rules make (``plan[rule]``), for comparing the rules on the same cells.
    """
    mask, repeat, hidden = draw
    path = _selection_table(prepared, hidden, tmp / f"{dataset.name}-{mask}-{repeat}.csv")
    # Nothing is dropped: every benchmark column is filled, as every reference fills it.
    survey_options = SurveyOptions(kinds=dataset.kinds, diagnostics=False, drop_threshold=1.0)
    score = ScoreOptions(survey=survey_options, masks=list(options.masks), rate=options.rate,
                         repeats=options.selection_repeats,
                         seed=derive_seed(options.seed, "selection", mask, repeat), sample=None,
                         n_jobs=options.n_jobs, downstream=False)
    start = time.perf_counter()
    plan, survey, result = score_table(read_table(path), score, progress=progress,
                                       executor=executor)
    seconds = time.perf_counter() - start
    actions = {n: default_action(c.spec.kind, drop=c.drop, is_target=False)
               for n, c in survey.columns.items()}
    plans = {PLAN: plan}
    if result is not None and len(result.scores):
        scored = list(dict.fromkeys(result.scores["column"]))
        for rule in CHOICE_RULES:
            if rule != score.choice_rule:
                plans[f"{PLAN}[{rule}]"] = plan_from_experiment(
                    survey, result, replace(score, choice_rule=rule),
                    actions=actions, scored=scored, sample_rows=len(survey.typed))
    return plans, seconds


def _plan_fill(plan: Plan, result: ExperimentResult, working: pd.DataFrame, columns: list[str],
               mask: str, repeat: int, hidden: np.ndarray) -> tuple[dict[str, np.ndarray], float]:
    """The plan's fill of one draw: each column takes its method's fill of that draw."""
    fills = result.fills.get((mask, repeat), {})
    out, used = {}, set()
    for j, name in enumerate(columns):
        col = plan.columns[name]
        method = col.method
        holes = hidden[:, j] | working[name].isna().to_numpy()
        pick = hidden[np.flatnonzero(holes), j]
        if method == "blend" and col.params.get("weights"):
            weights = col.params["weights"]
            if is_categorical(working[name]):
                source = col.params.get("label_method") or max(weights, key=weights.get)
                out[name] = fills[source][name][pick]
                used.add(source)
            else:
                out[name] = sum(w * fills[m][name][pick] for m, w in weights.items() if w > 0)
                used.update(m for m, w in weights.items() if w > 0)
        else:
            out[name] = fills[method][name][pick]
            used.add(method)
    seconds = sum(result.task_seconds.get((mask, repeat, m), 0.0) for m in used)
    return out, seconds


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
    return _reference_task(shared.working, shared.hidden[mask, repeat], shared.columns, name,
                           seed)


def _reference_errors(prepared: _Prepared, result: ExperimentResult, options: BenchOptions,
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


def _method_errors(prepared: _Prepared, result: ExperimentResult, mask: str, repeat: int,
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


def _floor_errors(prepared: _Prepared, hidden: np.ndarray,
                  scales: Mapping[str, float]) -> dict[str, float]:
    """The Bayes floor's errors on one draw of the ``gaussian`` set."""
    working, columns = prepared.working, prepared.columns
    mean, cov = gaussian_parameters()
    floor = bayes_floor_fill(working[columns].to_numpy(float), hidden, mean, cov)
    fills = {n: floor[hidden[:, j], j] for j, n in enumerate(columns)}
    return {**_errors(working, columns, hidden, fills, scales), "seconds": 0.0}


def _bench_dataset(dataset: Dataset, options: BenchOptions, tmp: Path, executor: Executor,
                   progress: Callable[[str, int, int], None]) -> dict[str, Any]:
    prepared = _prepare(dataset, options, tmp)
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
        plans[key], seconds = _choose_plans(
            dataset, prepared, options, (mask, repeat, hidden), tmp, executor,
            lambda d, t, i=i: progress(f"choosing plan {i} of {len(result.draws)}", d, t))
        score_seconds += seconds
        entry = per_draw.setdefault((mask, repeat), {})
        entry.update(_method_errors(prepared, result, mask, repeat, hidden, scales))
        for label, chosen in plans[key].items():
            fills, spent = _plan_fill(chosen, result, working, columns, mask, repeat, hidden)
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


# -- writing -------------------------------------------------------------------------------
def _fmt(value: float, se: float | None = None, digits: int = 3) -> str:
    if value is None or not math.isfinite(value):
        return ""
    text = f"{value:.{digits}f}"
    if se is not None and math.isfinite(se):
        text += f" ± {se:.{digits}f}"
    return text


def results_markdown(results: Mapping[str, Any], command: str = "") -> str:
    """The benchmark's results as Markdown."""
    s = results["settings"]
    lines = ["# Benchmark: imputelab against scikit-learn's imputers", ""]
    if command:
        lines += ["```bash", command, "```", ""]
    if results.get("partial"):
        lines += ["**Partial results: the run was still going when this was written.**", ""]
    lines += [f"Masks {', '.join(s['masks'])} at rate {s['rate']}; {s['repeats']} scored draws "
              f"per mask (seed {s['seed']}); each draw's plan chosen by `score` on the table with "
              f"that draw's cells blank, from {s['selection_repeats']} draws per mask of its own "
              f"among the cells still observed. {results['machine']['cores']} "
              f"cores, Python {results['machine']['python']}; {results['seconds']:.0f} s.",
              "", "Errors: NRMSE (mean over numeric columns) and PFC (share of wrong labels, "
              "mean over label columns), mean ± standard error over the draws. Ratios divide "
              "by the best scikit-learn reference of that dataset and mask (chosen after "
              "seeing the scores); seconds are fit + fill of one draw on one thread, and "
              f"× RF divides by {SPEED_REFERENCE}. The fills are estimates, not "
              "measurements.", "",
              "## Summary", "",
              "| dataset | rows | mask | plan NRMSE | best reference | plan / best | "
              "plan PFC | plan / best (PFC) | plan / Bayes floor |",
              "|---|---:|---|---:|---|---:|---:|---:|---:|"]
    for name, entry in results["datasets"].items():
        for mask, summary in entry["masks"].items():
            plan = summary["methods"][PLAN]
            best = summary.get("best_reference_nrmse", "")
            lines.append(
                f"| {name} | {entry['rows_used']:,} | {mask} | "
                f"{_fmt(plan['nrmse'], plan['nrmse_se'])} | {best} | "
                f"{_fmt(plan.get('nrmse_ratio', math.nan))} | "
                f"{_fmt(plan['pfc'], plan['pfc_se'])} | {_fmt(plan.get('pfc_ratio', math.nan))}"
                f" | {_fmt(plan.get('bayes_ratio', math.nan))} |")
    for name, why in results.get("skipped", {}).items():
        lines.append(f"| {name} | | | {why} | | | | | |")
    for name, entry in results["datasets"].items():
        sampled = (f", a seeded sample of {entry['rows_used']:,} of its "
                   f"{entry['rows_complete']:,} complete rows"
                   if entry["rows_used"] < entry["rows_complete"]
                   else f", its {entry['rows_used']:,} complete rows")
        lines += ["", f"## {name}", "",
                  f"{len(entry['columns'])} columns{sampled}. {entry['note']}".rstrip(), ""]
        chosen = pd.Series([m for plan in entry["plans"].values() for m in plan.values()]
                           ).value_counts()
        lines.append(f"Plans (one per scored draw, chosen in {entry['plan_score_seconds']:.1f} s "
                     "in all), column × draw: "
                     + ", ".join(f"{m} × {c}" for m, c in chosen.items()) + ".")
        for key, blend in entry["plan_blend"].items():
            weights = ", ".join(f"{m} {w:.2f}" for m, w in blend["weights"].items())
            lines.append(f"Blend weights in the plan for {key}: {weights}; labels from "
                         f"{blend['label_method'] or '-'}.")
        for mask, summary in entry["masks"].items():
            lines += ["", f"### {name}, {mask}", "",
                      "| method | NRMSE | × best | PFC | × best | s | × RF |",
                      "|---|---:|---:|---:|---:|---:|---:|"]
            for method, m in summary["methods"].items():
                lines.append(
                    f"| {method} | {_fmt(m['nrmse'], m['nrmse_se'])} | "
                    f"{_fmt(m.get('nrmse_ratio', math.nan))} | {_fmt(m['pfc'], m['pfc_se'])} | "
                    f"{_fmt(m.get('pfc_ratio', math.nan))} | {_fmt(m['seconds'], digits=2)} | "
                    f"{_fmt(m.get('seconds_ratio', math.nan), digits=2)} |")
    return "\n".join(lines) + "\n"


def _plot(results: Mapping[str, Any], path: Path) -> None:
    import imputelab.report.charts as charts  # matplotlib loads only when a plot is drawn

    cells = [(f"{n} {m}", s) for n, e in results["datasets"].items()
             for m, s in e["masks"].items()]
    shown = [PLAN, "blend", "chained-linear", "chained-forest", "chained-boosted", "knn",
             *REFERENCES]
    series = {method: [s["methods"].get(method, {}).get("nrmse_ratio", np.nan)
                       for _, s in cells] for method in shown}
    fig = charts.ratio_bars([c for c, _ in cells], series,
                            ylabel="NRMSE / best scikit-learn reference",
                            title="Error relative to the best scikit-learn imputer "
                                  "(lower is better)")
    svg = charts.figure_svg(fig, alt="NRMSE of each method divided by the best scikit-learn "
                                     "reference, per dataset and mask.", prefix="bench")
    with atomic_path(path) as tmp:
        Path(tmp).write_text(svg, encoding="utf-8")


def plain_data(value: Any) -> Any:
    """JSON-ready: NaN as null, numpy scalars as Python numbers, tuple keys as text."""
    if isinstance(value, Mapping):
        return {str(k): plain_data(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain_data(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        return round(value, 6) if math.isfinite(value) else None
    return value


def write_bench(results: Mapping[str, Any], out: Path, command: str = "") -> list[Path]:
    """Write ``results.json``, ``results.md`` and ``ratios.svg`` into ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    paths = [out / "results.json", out / "results.md", out / "ratios.svg"]
    with atomic_path(paths[0]) as tmp:
        tmp.write_text(json.dumps(plain_data({"command": command, **results}), indent=2)
                       + "\n", encoding="utf-8")
    with atomic_path(paths[1]) as tmp:
        tmp.write_text(results_markdown(results, command), encoding="utf-8")
    _plot(results, paths[2])
    return paths
