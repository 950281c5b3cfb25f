"""``bench``: every method, the chosen plan and scikit-learn's imputers on open datasets.

For each dataset (see :mod:`imputelab.bench.datasets`) the benchmark takes the rows complete over
its benchmark columns, then:

1. **chooses a plan** with :func:`imputelab.score.build.score_table` on its own mask draws (seed
   derived from ``(seed, "selection")``), so the plan never sees the cells it is scored on;
2. **hides cells** under each mask, ``repeats`` times (the experiment's seeds
   ``(seed, mask, repeat)``), and fills the same hidden cells with every imputelab method
   (:func:`imputelab.score.experiment.run_experiment`), with the plan (each column takes its
   method's fill of that draw; a ``blend`` column combines the draw's component fills with
   the plan's weights), and with the scikit-learn references of :data:`REFERENCES`;
3. for the ``gaussian`` set, computes the Bayes floor: the conditional mean of the hidden
   entries given the observed ones under the known parameters (Anderson 2003, *An
   Introduction to Multivariate Statistical Analysis*, 3rd ed., Theorem 2.5.1).

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
from joblib import Parallel, delayed
from threadpoolctl import threadpool_limits

from imputelab.bench.datasets import Dataset, dataset_names, gaussian_parameters, load_dataset
from imputelab.errors import OptionError
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
from imputelab.survey.table import SurveyOptions

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
    working: pd.DataFrame
    kinds: dict[str, str]
    columns: list[str]
    table_path: Path
    rows_complete: int
    rows_used: int


def _prepare(dataset: Dataset, options: BenchOptions, tmp: Path) -> _Prepared:
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
    return _Prepared(working=pd.DataFrame(), kinds={}, columns=[], table_path=path,
                     rows_complete=len(complete), rows_used=len(used))


def _choose_plan(dataset: Dataset, prepared: _Prepared, options: BenchOptions,
                 progress: Callable[[int, int], None] | None
                 ) -> tuple[dict[str, Plan], float]:
    """The plan ``score`` makes on the complete rows, from its own mask draws.

    Returns the default plan under :data:`PLAN` and, from the same experiment, the plans the
    other choice rules make (``plan[rule]``), for comparing the rules on the same cells.
    """
    score = ScoreOptions(survey=SurveyOptions(kinds=dataset.kinds, diagnostics=False),
                         masks=list(options.masks), rate=options.rate,
                         repeats=options.selection_repeats,
                         seed=derive_seed(options.seed, "selection"), sample=None,
                         n_jobs=options.n_jobs, downstream=False)
    start = time.perf_counter()
    plan, survey, result = score_table(read_table(prepared.table_path), score,
                                       progress=progress)
    seconds = time.perf_counter() - start
    actions = {n: default_action(c.spec.kind, drop=c.drop, is_target=False)
               for n, c in survey.columns.items()}
    plans = {PLAN: plan}
    if result is not None and len(result.scores):
        scored = list(dict.fromkeys(result.scores["column"]))
        for rule in CHOICE_RULES:
            if rule != score.choice_rule:
                plans[f"{PLAN}[{rule}]"] = plan_from_experiment(
                    survey, result, replace(score, masks=list(options.masks),
                                            choice_rule=rule),
                    actions=actions, scored=scored, sample_rows=len(survey.typed))
    targets, encoding = working_setup(survey.typed, survey.specs, actions)
    prepared.working = encoding.encode(survey.typed)
    prepared.kinds = dict(encoding.kinds)
    prepared.columns = targets
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


def _bench_dataset(dataset: Dataset, options: BenchOptions, tmp: Path,
                   progress: Callable[[str, int, int], None]) -> dict[str, Any]:
    prepared = _prepare(dataset, options, tmp)
    plans, score_seconds = _choose_plan(dataset, prepared, options,
                                        lambda d, t: progress("choosing the plan", d, t))
    plan = plans[PLAN]
    working, columns = prepared.working, prepared.columns
    methods = {m: {} for m in get_method_names()}
    result = run_experiment(working, prepared.kinds, columns, methods=methods,
                            masks=list(options.masks), rate=options.rate,
                            repeats=options.repeats, seed=options.seed, n_jobs=options.n_jobs,
                            keep_fills=True,
                            progress=lambda d, t: progress("imputelab methods", d, t))
    scales = {n: float(np.nanstd(working[n].to_numpy(float))) for n in columns
              if not is_categorical(working[n])}
    tasks = [(mask, repeat, hidden, ref) for mask, repeat, hidden in result.draws
             for ref in REFERENCES]
    jobs = (delayed(_reference_task)(working, hidden, columns, ref,
                                     derive_seed(options.seed, mask, repeat, ref))
            for mask, repeat, hidden, ref in tasks)
    runner = (Parallel(n_jobs=options.n_jobs, return_as="generator") if options.n_jobs > 1
              else lambda js: (j[0](*j[1], **j[2]) for j in js))
    per_draw: dict[tuple[str, int], dict[str, dict[str, float]]] = {}
    for done, ((mask, repeat, hidden, ref), (fills, seconds)) in enumerate(
            zip(tasks, runner(jobs), strict=True), start=1):
        per_draw.setdefault((mask, repeat), {})[ref] = {
            **_errors(working, columns, hidden, fills, scales), "seconds": seconds}
        progress("scikit-learn references", done, len(tasks))
    gaussian = dataset.name == "gaussian"
    for mask, repeat, hidden in result.draws:
        entry = per_draw.setdefault((mask, repeat), {})
        for method in methods:
            fills = result.fills.get((mask, repeat), {}).get(method)
            if fills is None:
                continue
            pick = {n: fills[n][hidden[np.flatnonzero(hidden[:, j] | working[n].isna()
                                                       .to_numpy()), j]]
                    for j, n in enumerate(columns) if n in fills}
            entry[method] = {**_errors(working, columns, hidden, pick, scales),
                             "seconds": result.task_seconds.get((mask, repeat, method), 0.0)}
        for label, chosen in plans.items():
            fills, seconds = _plan_fill(chosen, result, working, columns, mask, repeat, hidden)
            entry[label] = {**_errors(working, columns, hidden, fills, scales),
                            "seconds": seconds}
        if gaussian:
            mean, cov = gaussian_parameters()
            values = working[columns].to_numpy(float)
            floor = bayes_floor_fill(values, hidden, mean, cov)
            entry[BAYES] = {**_errors(working, columns, hidden,
                                      {n: floor[hidden[:, j], j] for j, n in enumerate(columns)},
                                      scales), "seconds": 0.0}
    masks_out = {mask: _summarise({r: per_draw[(mask, r)] for r in range(options.repeats)})
                 for mask in options.masks}
    return {
        "rows_complete": prepared.rows_complete,
        "rows_used": prepared.rows_used,
        "note": dataset.note,
        "columns": {n: prepared.kinds[n] for n in columns},
        "plan": {n: plan.columns[n].method for n in columns},
        "plan_rule": plan.settings.get("choice_rule"),
        "other_rules": {label: {n: p.columns[n].method for n in columns}
                        for label, p in plans.items() if label != PLAN},
        "plan_blend": next(({"weights": plan.columns[n].params.get("weights"),
                             "label_method": plan.columns[n].params.get("label_method")}
                            for n in columns if plan.columns[n].method == "blend"), None),
        "plan_score_seconds": round(score_seconds, 2),
        "experiment_blend_weights": result.blend.get("weights"),
        "failures": result.failures,
        "masks": masks_out,
    }


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
              done: Callable[[dict[str, Any]], None] | None = None) -> dict[str, Any]:
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
    """
    options.validate()
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
                dataset, options, Path(tmp),
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
              f"per mask (seed {s['seed']}); the plan chosen by `score` on "
              f"{s['selection_repeats']} other draws per mask. {results['machine']['cores']} "
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
        chosen = pd.Series(entry["plan"]).value_counts()
        lines.append("Plan: " + ", ".join(f"{m} × {c}" for m, c in chosen.items())
                     + f" (chosen in {entry['plan_score_seconds']:.1f} s).")
        if entry["plan_blend"]:
            weights = ", ".join(f"{m} {w:.2f}" for m, w in entry["plan_blend"]["weights"].items())
            lines.append(f"Blend weights in the plan: {weights}; labels from "
                         f"{entry['plan_blend']['label_method'] or '-'}.")
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
