"""The plan side of the benchmark: the rows it uses, a plan per scored draw, and its fill.

A scored draw's plan is chosen by ``score`` on the complete rows with that draw's hidden cells
blank; ``score``'s masks hide only observed cells, so the cells a plan is scored on are never
hidden, filled or seen when it is chosen (see :mod:`imputelab.bench.runner`).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from imputelab.bench.datasets import Dataset
from imputelab.bench.options import PLAN, BenchOptions
from imputelab.executors.pool import Executor
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import is_categorical
from imputelab.frame.setup import default_action, working_setup
from imputelab.io.tables import read_table
from imputelab.score.build import CHOICE_RULES, ScoreOptions, plan_from_experiment, score_table
from imputelab.score.experiment import ExperimentResult
from imputelab.score.plan import Plan
from imputelab.survey.table import SurveyOptions, survey_table

__all__ = ["Prepared", "choose_plans", "plan_fill", "prepare"]


@dataclass
class Prepared:
    """A dataset's complete rows as the benchmark uses them, and their working frame."""

    used: pd.DataFrame  # the complete rows the benchmark uses, as loaded
    working: pd.DataFrame
    kinds: dict[str, str]
    columns: list[str]
    rows_complete: int


def prepare(dataset: Dataset, options: BenchOptions, tmp: Path) -> Prepared:
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
    return Prepared(used=used, working=encoding.encode(survey.typed),
                     kinds=dict(encoding.kinds), columns=targets, rows_complete=len(complete))


def _selection_table(prepared: Prepared, hidden: np.ndarray, path: Path) -> Path:
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


def choose_plans(dataset: Dataset, prepared: Prepared, options: BenchOptions,
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


def plan_fill(plan: Plan, result: ExperimentResult, working: pd.DataFrame, columns: list[str],
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
