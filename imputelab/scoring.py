"""``score``: survey a table, run the experiment, choose a method per column, make the plan."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from importlib.metadata import PackageNotFoundError, version
from typing import Any

import numpy as np
import pandas as pd

from imputelab.errors import OptionError
from imputelab.experiment import ExperimentResult, derive_seed, run_experiment
from imputelab.io import Table
from imputelab.masks import get_mask_names
from imputelab.methods import METHODS, get_method_names
from imputelab.metrics import PRIMARY, get_metric
from imputelab.plan import ColumnPlan, Plan, choose_method
from imputelab.prepare import default_action, working_setup
from imputelab.survey import Survey, SurveyOptions, survey_table

__all__ = ["DEFAULT_MASKS", "ScoreOptions", "plan_from_experiment", "score_table"]

DEFAULT_MASKS = ("mcar", "mar", "mnar")
MIN_OBSERVED = 10  # fewer observed cells than this cannot be split into hidden and kept


def _version() -> str:
    try:
        return version("imputelab")
    except PackageNotFoundError:  # running from a source tree
        return "0+unknown"


@dataclass
class ScoreOptions:
    """Settings of the experiment.

    Attributes
    ----------
    survey : SurveyOptions
    masks : sequence of str
    rate : float
        Share of each column's observed cells hidden per draw.
    repeats : int
        Draws per mask.
    seed : int
    methods : sequence of str, optional
        Candidate methods (all registered by default).
    metrics : dict
        Primary metric per kind (``numeric``, ``categorical``).
    sample : int, optional
        Run the experiment on at most this many rows (fill always uses every row).
    use_target : bool
        Let the target serve as a feature when filling the others.
    n_jobs : int
    """

    survey: SurveyOptions = field(default_factory=SurveyOptions)
    masks: Sequence[str] = DEFAULT_MASKS
    rate: float = 0.2
    repeats: int = 3
    seed: int = 0
    methods: Sequence[str] | None = None
    metrics: dict[str, str] = field(default_factory=lambda: dict(PRIMARY))
    sample: int | None = 10_000
    use_target: bool = False
    n_jobs: int = 1

    def validate(self) -> None:
        """Check ranges and names; raise :class:`OptionError`."""
        if not 0.0 < self.rate < 1.0:
            raise OptionError(f"--rate must be strictly between 0 and 1, got {self.rate}")
        if self.seed < 0:
            raise OptionError(f"--seed must be 0 or more, got {self.seed}")
        if self.repeats < 1:
            raise OptionError(f"--repeats must be at least 1, got {self.repeats}")
        if self.sample is not None and self.sample < 20:
            raise OptionError(f"--sample must be at least 20 rows, got {self.sample}")
        for name in self.masks:
            if name not in get_mask_names():
                raise OptionError(
                    f"--masks: unknown mask '{name}'; choose from: {', '.join(get_mask_names())}")
        if not self.masks:
            raise OptionError("--masks: give at least one mask")
        for name in self.methods or ():
            if name not in METHODS:
                raise OptionError(
                    f"--methods: unknown method '{name}'; choose from: "
                    f"{', '.join(get_method_names())}")
        if self.methods is not None and not self.methods:
            raise OptionError("--methods: give at least one method")
        for kind, metric in self.metrics.items():
            found = get_metric(metric)
            if found.kind != kind:
                raise OptionError(f"--metric {metric} is a {found.kind} metric, not {kind}")


def _summary(scores: pd.DataFrame, metric: str, masks: Sequence[str]) -> dict[str, dict]:
    """Per method: every metric's mean, the primary metric's SE and per-mask means."""
    out: dict[str, dict] = {}
    metric_cols = [c for c in scores.columns
                   if c not in ("column", "method", "mask", "repeat", "n_hidden")]
    for method, group in scores.groupby("method", sort=False):
        entry = {c: float(group[c].mean()) for c in metric_cols if group[c].notna().any()}
        values = group[metric].to_numpy(float)
        values = values[np.isfinite(values)]
        se = float(values.std(ddof=1) / math.sqrt(len(values))) if len(values) > 1 else 0.0
        entry[f"{metric}_se"] = se
        for mask in masks:
            part = group.loc[group["mask"] == mask, metric]
            if len(part):
                entry[f"{metric}@{mask}"] = float(part.mean())
        out[str(method)] = entry
    return out


def _fallback(kind: str, values: pd.Series, why: str | None = None) -> tuple[str, str]:
    observed = int(values.notna().sum())
    if why is not None:
        label = why
    elif observed == 0:
        label = "no observed value"
    elif observed < MIN_OBSERVED:
        label = f"only {observed} observed value{'s' if observed > 1 else ''}"
    elif values.dropna().nunique() == 1:
        return "mode", "a single distinct observed value: filled with it (nothing to learn)"
    else:
        label = "not tested"
    if kind in ("numeric", "datetime"):
        return "median", f"{label}: too few to test methods; median as a plain default"
    return "mode", (f"{label}: too few to test methods; most frequent value as a plain "
                    "default")


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
    simplicity = {m: METHODS[m].simplicity for m in methods}
    columns: dict[str, ColumnPlan] = {}
    target = options.survey.target
    for name, col in survey.columns.items():
        kind = col.spec.kind
        action = actions[name]
        plan = ColumnPlan(kind=kind, missing_fraction=col.missing_fraction, action=action,
                          cleaning=col.spec.to_dict())
        if action == "drop":
            plan.reason = (f"{col.missing_fraction:.1%} missing, above the drop threshold "
                           f"{options.survey.drop_threshold:g}")
        elif action == "exclude":
            plan.reason = ("the target: never imputed, and not used to fill the others"
                           if name == target and not options.use_target else
                           "the target: never imputed; used as a feature (--use-target)"
                           if name == target else
                           f"{kind} column: passed through unchanged")
        elif name in scored and result is not None and len(result.scores):
            metric_kind = "numeric" if kind in ("numeric", "datetime") else "categorical"
            metric = options.metrics.get(metric_kind, PRIMARY[metric_kind])
            rows = result.scores[result.scores["column"] == name]
            summary = _summary(rows, metric, options.masks)
            for method, entry in summary.items():
                draws = int((rows["method"] == method).sum())
                entry["draws"] = draws
            plan.scores = summary
            plan.skipped = dict(result.skipped.get(name, {}))
            usable = {m: (s[metric], s[f"{metric}_se"]) for m, s in summary.items()
                      if metric in s and s[metric] is not None and math.isfinite(s[metric])}
            if not usable:
                plan.method, plan.reason = _fallback(
                    kind, survey.typed[name],
                    why=f"no candidate method ({', '.join(methods)}) could fill this {kind} "
                        "column")
                plan.params = _public_params(plan.method)
                columns[name] = plan
                continue
            chosen, why = choose_method(usable, simplicity, metric=metric,
                                        greater_is_better=get_metric(metric).greater_is_better,
                                        order=methods)
            plan.method = chosen
            draws = summary[chosen]["draws"]
            if chosen == "constant":
                fills = "0" if metric_kind == "numeric" else "the new label 'missing'"
                why += f"; constant fills {fills}"
            plural = "s" if draws != 1 else ""
            plan.reason = f"{why} (over {draws} masked draw{plural}: {', '.join(options.masks)})"
        elif name in scored:
            plan.method, plan.reason = _fallback(
                kind, survey.typed[name], why="every candidate method failed on this column")
        else:
            plan.method, plan.reason = _fallback(kind, survey.typed[name])
        if plan.method is not None:
            plan.params = _public_params(plan.method)
        columns[name] = plan
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
    settings = {
        "masks": list(options.masks),
        "rate": options.rate,
        "repeats": options.repeats,
        "seed": options.seed,
        "methods": methods,
        "metrics": dict(options.metrics),
        "choice": "lowest mean primary metric; the simplest method within one standard error "
                  "wins (simplicity: constant < mean, median, mode < knn < chained-linear < "
                  "chained-forest < chained-boosted)",
        "drop_threshold": options.survey.drop_threshold,
        "sample": options.sample,
        "experiment_rows": sample_rows,
        "target": target,
        "use_target": options.use_target,
        "imputelab_version": _version(),
    }
    return Plan(source=source, settings=settings, columns=columns)


def _public_params(method: str) -> dict[str, Any]:
    params = METHODS[method]().get_params()
    params.pop("random_state", None)
    return params


def score_table(
    table: Table,
    options: ScoreOptions | None = None,
    *,
    progress: Callable[[int, int], None] | None = None,
) -> tuple[Plan, Survey, ExperimentResult | None]:
    """Survey a table, run the experiment and choose a method per column.

    Parameters
    ----------
    table : Table
    options : ScoreOptions, optional
    progress : callable, optional
        ``progress(done, total)`` after each experiment task.

    Returns
    -------
    plan : Plan
    survey : Survey
    result : ExperimentResult or None
        None when no column could be tested.
    """
    options = options or ScoreOptions()
    options.validate()
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
    result = None
    if scored:
        methods = {m: {} for m in (options.methods or get_method_names())}
        result = run_experiment(
            working, encoding.kinds, scored, methods=methods, masks=options.masks,
            rate=options.rate, repeats=options.repeats, seed=options.seed,
            dtypes=dict(survey.typed.dtypes), n_jobs=options.n_jobs, progress=progress,
        )
    plan = plan_from_experiment(survey, result, options, actions=actions, scored=scored,
                                sample_rows=len(working))
    return plan, survey, result
