"""``score``: survey a table, run the experiment, choose a method per column, make the plan."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import replace
from importlib.metadata import PackageNotFoundError, version
from typing import Any

import numpy as np
import pandas as pd

from imputelab.executors.pool import Executor
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import Encoding
from imputelab.frame.setup import default_action, working_setup
from imputelab.io.tables import Table
from imputelab.methods import METHODS, get_method_names
from imputelab.methods.blend import COMPONENTS
from imputelab.metrics.scores import PRIMARY, get_metric
from imputelab.score.choice import (
    choice_words,
    metric_kind,
    paired_se,
    summarise_scores,
    table_choice,
    table_leaders,
)
from imputelab.score.experiment import ExperimentResult, run_experiment
from imputelab.score.heldout import draw_held_out, expected_errors
from imputelab.score.options import (
    CHOICE_RULES,
    CHOOSE_BY,
    DEFAULT_MASKS,
    MIN_OBSERVED,
    ScoreOptions,
)
from imputelab.score.plan import ColumnPlan, Plan, choose_method
from imputelab.score.reasons import apply_evidence, distribution_note, fallback
from imputelab.score.target import run_target_experiment
from imputelab.survey.table import Survey, survey_table

__all__ = ["CHOICE_RULES", "CHOOSE_BY", "DEFAULT_MASKS", "MIN_OBSERVED", "ScoreOptions",
           "plan_from_experiment", "score_table"]


def _version() -> str:
    try:
        return version("imputelab")
    except PackageNotFoundError:  # running from a source tree
        return "0+unknown"


def plan_from_experiment(
    survey: Survey,
    result: ExperimentResult | None,
    options: ScoreOptions,
    *,
    actions: dict[str, str],
    scored: Sequence[str],
    sample_rows: int,
) -> Plan:
    """Choose a method per column from the experiment's scores and build the plan."""
    methods = list(options.methods or get_method_names())
    tested = result is not None and len(result.scores) > 0
    leaders = (table_leaders(survey, result, options, scored)
               if options.choice_rule == "table" and tested else {})
    columns = {}
    for name, col in survey.columns.items():
        plan = ColumnPlan(kind=col.spec.kind, missing_fraction=col.missing_fraction,
                          action=actions[name], cleaning=col.spec.to_dict())
        if plan.action == "impute":
            _choose(plan, name, survey, result if tested else None, options, scored,
                    leaders, methods)
        else:
            plan.reason = _kept_reason(plan, name, options)
        plan.evidence = dict(col.evidence)
        if plan.action == "impute":
            apply_evidence(plan, col, survey.typed[name])
        columns[name] = plan
    return Plan(source=_source(survey, options.survey.target),
                settings=_settings(options, methods, sample_rows), columns=columns,
                survey=_table_checks(survey))


def _table_checks(survey: Survey) -> dict[str, Any]:
    """The survey's table-wide checks, stored for the report (which then surveys no more)."""
    checks = survey.evidence.table_dict() if survey.evidence is not None else {}
    return {"checks": survey.evidence is not None,
            **{k: checks[k] for k in ("mcar_test", "co_missing") if k in checks}}


def _kept_reason(plan: ColumnPlan, name: str, options: ScoreOptions) -> str:
    """Why a column is dropped or passed through."""
    if plan.action == "drop":
        return (f"{plan.missing_fraction:.1%} missing, above the drop threshold "
                f"{options.survey.drop_threshold:g}")
    if name != options.survey.target:
        return f"{plan.kind} column: passed through unchanged"
    if options.use_target:
        return "the target: never imputed; used as a feature (use_target)"
    return "the target: never imputed, and not used to fill the others"


def _choose(plan: ColumnPlan, name: str, survey: Survey, result: ExperimentResult | None,
            options: ScoreOptions, scored: Sequence[str], leaders: dict[str, str],
            methods: list[str]) -> None:
    """The method of an imputed column: the experiment's choice, or a plain default."""
    if name in scored and result is not None:
        _choose_scored(plan, name, survey, result, options, leaders, methods)
    else:
        why = "every candidate method failed on this column" if name in scored else None
        plan.method, plan.reason = fallback(plan.kind, survey.typed[name], why=why)
    plan.params = _public_params(plan.method)
    if plan.method == "blend" and result is not None and result.blend:
        plan.params.update(weights=dict(result.blend["weights"]),
                           label_method=result.blend["label_method"])
        weights = ", ".join(f"{m} {w:.2f}" for m, w in result.blend["weights"].items())
        plan.reason += f"; blend weights (fitted on every draw's hidden cells): {weights}"


def _choose_scored(plan: ColumnPlan, name: str, survey: Survey, result: ExperimentResult,
                   options: ScoreOptions, leaders: dict[str, str], methods: list[str]) -> None:
    """Apply the choice rule to a column's selection scores."""
    family = metric_kind(plan.kind)
    primary = options.metrics.get(family, PRIMARY[family])
    metric = primary if options.choose_by == "accuracy" else options.choose_by
    rows = result.scores[result.scores["column"] == name]
    summary = summarise_scores(rows, [primary, metric], options.masks)
    for method, entry in summary.items():
        entry["draws"] = int((rows["method"] == method).sum())
    plan.scores, plan.skipped = summary, dict(result.skipped.get(name, {}))
    usable = {m: (s[metric], s[f"{metric}_se"]) for m, s in summary.items()
              if metric in s and s[metric] is not None and math.isfinite(s[metric])}
    if not usable:
        plan.method, plan.reason = fallback(
            plan.kind, survey.typed[name],
            why=f"no candidate method ({', '.join(methods)}) could fill this {plan.kind} "
                "column")
        return
    greater = metric == primary and get_metric(metric).greater_is_better
    leader = leaders.get(family)
    if leader is not None and leader in usable:
        chosen, why = table_choice(rows, metric, usable, greater, leader)
    else:
        paired = (paired_se(rows, metric, usable, greater)
                  if options.choice_rule != "unpaired" else None)
        chosen, why = choose_method(usable, {m: METHODS[m].simplicity for m in methods},
                                    metric=metric, greater_is_better=greater, order=methods,
                                    paired_se=paired)
    why += distribution_note(summary, chosen, family)
    if chosen == "constant":
        why += "; constant fills " + ("0" if family == "numeric" else "the new label 'missing'")
    draws = summary[chosen]["draws"]
    plan.method = chosen
    plan.reason = (f"{why} (selection scores over {draws} masked draw"
                   f"{'s' if draws != 1 else ''}: {', '.join(options.masks)})")


def _source(survey: Survey, target: str | None) -> dict[str, Any]:
    source = {
        "file": survey.table.path.name,
        "format": survey.table.format,
        "rows": survey.rows,
        "columns": list(survey.columns),
        "fingerprint": f"sha256:{survey.table.fingerprint}",
        "delimiter": survey.table.delimiter,
        "decimal": survey.table.decimal,
    }
    if target is not None:
        source["target_missing_rows"] = int(survey.typed[target].isna().sum())
    return source


def _settings(options: ScoreOptions, methods: list[str], sample_rows: int) -> dict[str, Any]:
    return {
        "masks": list(options.masks),
        "rate": options.rate,
        "repeats": options.repeats,
        "seed": options.seed,
        "methods": methods,
        "metrics": dict(options.metrics),
        "choose_by": options.choose_by,
        "choice": choice_words(options),
        "choice_rule": options.choice_rule,
        "drop_threshold": options.survey.drop_threshold,
        "sample": options.sample,
        "experiment_rows": sample_rows,
        "target": options.survey.target,
        "use_target": options.use_target,
        "imputelab_version": _version(),
    }


def _public_params(method: str) -> dict[str, Any]:
    params = METHODS[method]().get_params()
    params.pop("random_state", None)
    return params


def score_table(
    table: Table,
    options: ScoreOptions | None = None,
    *,
    progress: Callable[[int, int], None] | None = None,
    executor: Executor | None = None,
) -> tuple[Plan, Survey, ExperimentResult | None]:
    """Survey a table, run the experiment and choose a method per column.

    Parameters
    ----------
    table : Table
    options : ScoreOptions, optional
    progress : callable, optional
        ``progress(done, total)`` after each experiment task.
    executor : Executor, optional
        Where the experiment's tasks run (:mod:`imputelab.executors.pool`, e.g. a Dask cluster);
        by default ``options.n_jobs`` local processes. The plan does not depend on it. The
        held-out fits and the target check's grid run there too; the survey's checks run
        here, with ``options.n_jobs``.

    Returns
    -------
    plan : Plan
    survey : Survey
    result : ExperimentResult or None
        None when no column could be tested.
    """
    options = options or ScoreOptions()
    options.validate()
    if executor is not None and options.survey.executor is None:
        # The survey's per-column checks run where the experiment runs (e.g. on a cluster).
        options = replace(options, survey=replace(options.survey, executor=executor))
    survey = survey_table(table, options.survey)
    target = options.survey.target
    actions = {name: default_action(col.spec.kind, drop=col.drop, is_target=name == target)
               for name, col in survey.columns.items()}
    targets, encoding = working_setup(survey.typed, survey.specs, actions, target=target,
                                      use_target=options.use_target)
    working = encoding.encode(survey.typed)
    if options.sample is not None and len(working) > options.sample:
        rng = np.random.default_rng(derive_seed(options.seed, "sample"))
        rows = np.sort(rng.choice(len(working), options.sample, replace=False))
        working = working.iloc[rows].reset_index(drop=True)
    scored = [n for n in targets
              if working[n].notna().sum() >= MIN_OBSERVED and working[n].nunique() >= 2]
    if options.masks is None:
        holes = bool(len(scored)) and bool(working[scored].isna().to_numpy().any())
        options = replace(options, masks=DEFAULT_MASKS + (("pattern",) if holes else ()))
    result = None
    held = draw_held_out(working, scored, options.masks, options.rate, options.seed)
    if scored:
        methods = {m: {} for m in (options.methods or get_method_names())}
        result = run_experiment(
            working, encoding.kinds, scored, methods=methods, masks=options.masks,
            rate=options.rate, repeats=options.repeats, seed=options.seed,
            dtypes=dict(survey.typed.dtypes), n_jobs=options.n_jobs, progress=progress,
            executor=executor, held_out=held,
        )
    plan = plan_from_experiment(survey, result, options, actions=actions, scored=scored,
                                sample_rows=len(working))
    if scored:
        _held_out_errors(plan, working, encoding.kinds, scored, held, options,
                         dict(survey.typed.dtypes), executor, progress)
    if target is not None and options.downstream and targets:
        _downstream(plan, survey, encoding, targets, options, progress, executor)
    return plan, survey, result


def _held_out_errors(plan: Plan, working: pd.DataFrame, kinds: dict[str, str],
                     scored: Sequence[str], held: dict[str, np.ndarray], options: ScoreOptions,
                     dtypes: dict[str, Any], executor: Executor | None,
                     progress: Callable[[int, int], None] | None) -> None:
    """Fit each chosen method on the held-out copies; record and quote its expected error."""
    chosen = {n: (plan.columns[n].method, plan.columns[n].params) for n in scored
              if plan.columns[n].action == "impute" and plan.columns[n].method}
    # The error is the primary metric, whatever score ranked the methods.
    kinds_of = {n: metric_kind(plan.columns[n].kind) for n in chosen}
    metrics = {n: options.metrics.get(k, PRIMARY[k]) for n, k in kinds_of.items()}
    found = expected_errors(working, kinds, scored, held, chosen, metrics, seed=options.seed,
                            dtypes=dtypes, n_jobs=options.n_jobs, executor=executor,
                            progress=progress)
    for name, entry in found.items():
        col = plan.columns[name]
        col.expected_error = entry
        if entry is None:
            col.reason += ". Held-out expected error: not measurable (no held-out fit scored it)"
            continue
        spread = f" ± {entry['se']:.2g} SE" if entry["se"] is not None else ""
        plural = "s" if entry["draws"] != 1 else ""
        col.reason += (f". Held-out expected error: {entry['metric']} {entry['score']:.3g}"
                       f"{spread} ({col.method} refitted without the held-out cells, which "
                       f"no selection score or weight saw; {entry['draws']} mask{plural})")


def _downstream(plan: Plan, survey: Survey, encoding: Encoding, targets: list[str],
                options: ScoreOptions, progress: Callable[[int, int], None] | None,
                executor: Executor | None = None) -> None:
    """Score every fill by a model of the target; recommend indicators where they help."""
    target = options.survey.target
    kind = survey.columns[target].spec.kind
    if kind not in ("numeric", "binary", "categorical"):
        plan.downstream = {"skipped": f"the target '{target}' is a {kind} column; the model "
                                      "experiment needs a numeric or label target"}
        return
    features = encoding.encode(survey.typed).drop(columns=[target], errors="ignore")
    methods = list(options.methods or get_method_names())
    if "blend" in methods and all(m in methods for m in COMPONENTS):
        # Its components are there; per fold it would refit all three twice for its weights.
        methods.remove("blend")
    result = run_target_experiment(
        features, {n: encoding.kinds[n] for n in features.columns}, targets,
        survey.typed[target], kind, methods=methods, n_splits=options.downstream_folds,
        seed=options.seed, n_jobs=options.n_jobs, dtypes=dict(survey.typed.dtypes),
        progress=progress, executor=executor,
    )
    plan.downstream = result.to_dict()
    for name, entry in result.indicators.items():
        col = plan.columns.get(name)
        if col is None or col.action != "impute" or not entry.get("recommend"):
            continue
        col.indicator = True
        col.reason += (f". A missing-indicator column helps the model of '{target}' "
                       f"(permutation importance {entry['importance']:.3g} ± "
                       f"{entry['se']:.2g} over the folds): fill adds {name}__was_missing")
