"""``score``: survey a table, run the experiment, choose a method per column, make the plan."""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from importlib.metadata import PackageNotFoundError, version
from typing import Any

import numpy as np
import pandas as pd

from imputelab.errors import OptionError
from imputelab.executors.pool import Executor
from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import Encoding
from imputelab.frame.setup import default_action, working_setup
from imputelab.io.tables import Table
from imputelab.masks import get_mask_names
from imputelab.methods import METHODS, get_method_names
from imputelab.methods.blend import COMPONENTS
from imputelab.metrics.scores import PRIMARY, get_metric
from imputelab.score.experiment import ExperimentResult, run_experiment
from imputelab.score.plan import ColumnPlan, Plan, choose_method
from imputelab.score.target import run_target_experiment
from imputelab.survey.diagnostics import ABSENT_LABEL
from imputelab.survey.table import ColumnSurvey, Survey, SurveyOptions, survey_table

__all__ = ["CHOOSE_BY", "DEFAULT_MASKS", "ScoreOptions", "plan_from_experiment", "score_table"]

DEFAULT_MASKS = ("mcar", "mar", "mnar")
CHOOSE_BY = ("accuracy", "distribution", "balanced")
CHOICE_RULES = ("table", "paired", "unpaired")
MIN_OBSERVED = 10  # fewer observed cells than this cannot be split into hidden and kept


_CHOICE_WORDS = {
    "accuracy": "primary metric",
    "distribution": "distribution score (wasserstein + corr_shift; total variation for labels)",
    "balanced": "balanced score (mean of nrmse or pfc and the distribution score)",
}


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
    masks : sequence of str, optional
        Mask names; by default :data:`DEFAULT_MASKS`, plus ``pattern`` when the scored
        columns have holes whose patterns can be replayed.
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
    choose_by : {"accuracy", "distribution", "balanced"}
        What the one-standard-error rule ranks by: the primary metric; ``distribution``
        (wasserstein + corr_shift for numbers, total variation for labels); or
        ``balanced``, the mean of nrmse (pfc for labels) and ``distribution``.
    downstream : bool
        With a target, also score every fill by cross-validated models of the target
        (:mod:`imputelab.score.target`); the target never fills a feature there.
    downstream_folds : int
        Folds of that experiment.
    choice_rule : {"table", "paired", "unpaired"}
        ``table``: every column of a kind takes the method with the best mean score over all
        those columns, unless another method beats it on the column by more than two
        standard errors of their paired per-draw differences. ``paired``: the one-SE rule
        per column with the SE of each method's per-draw difference from the best on the
        same hidden cells; ``unpaired``: the one-SE rule with the best method's own SE.
    """

    survey: SurveyOptions = field(default_factory=SurveyOptions)
    masks: Sequence[str] | None = None
    rate: float = 0.2
    repeats: int = 3
    seed: int = 0
    methods: Sequence[str] | None = None
    metrics: dict[str, str] = field(default_factory=lambda: dict(PRIMARY))
    sample: int | None = 10_000
    use_target: bool = False
    n_jobs: int = 1
    choose_by: str = "accuracy"
    downstream: bool = True
    downstream_folds: int = 5
    choice_rule: str = "table"

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
        for name in self.masks or ():
            if name not in get_mask_names():
                raise OptionError(
                    f"--masks: unknown mask '{name}'; choose from: {', '.join(get_mask_names())}")
        if self.masks is not None and not self.masks:
            raise OptionError("--masks: give at least one mask")
        for name in self.methods or ():
            if name not in METHODS:
                raise OptionError(
                    f"--methods: unknown method '{name}'; choose from: "
                    f"{', '.join(get_method_names())}")
        if self.methods is not None and not self.methods:
            raise OptionError("--methods: give at least one method")
        if self.downstream_folds < 2:
            raise OptionError(f"--target-folds must be at least 2, got {self.downstream_folds}")
        if self.choice_rule not in CHOICE_RULES:
            raise OptionError(f"choice rule must be one of {', '.join(CHOICE_RULES)}, "
                              f"got '{self.choice_rule}'")
        if self.choose_by not in CHOOSE_BY:
            raise OptionError(f"--choose-by must be one of {', '.join(CHOOSE_BY)}, "
                              f"got '{self.choose_by}'")
        for kind, metric in self.metrics.items():
            found = get_metric(metric)
            if found.kind != kind:
                raise OptionError(f"--metric {metric} is a {found.kind} metric, not {kind}")


def _summary(scores: pd.DataFrame, metrics: Sequence[str],
             masks: Sequence[str]) -> dict[str, dict]:
    """Per method: every score's mean; for ``metrics``, the SE and per-mask means too."""
    out: dict[str, dict] = {}
    metric_cols = [c for c in scores.columns
                   if c not in ("column", "method", "mask", "repeat", "n_hidden")]
    for method, group in scores.groupby("method", sort=False):
        entry = {c: float(group[c].mean()) for c in metric_cols if group[c].notna().any()}
        for metric in dict.fromkeys(metrics):
            if metric not in group:
                continue
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


def _choice_words(options: ScoreOptions) -> str:
    words = _CHOICE_WORDS[options.choose_by]
    if options.choice_rule == "table":
        return (f"the method with the lowest mean {words} over all columns of a kind, "
                "unless another beats it on a column by more than two standard errors of "
                "their paired per-draw differences")
    return (f"lowest mean {words}; the simplest method within one standard error "
            + ("of its paired per-draw difference from the best "
               if options.choice_rule == "paired" else "")
            + "wins (simplicity: constant < mean, median, mode < knn < chained-linear "
            "< chained-forest < chained-boosted < blend)")


def _metric_for(options: ScoreOptions, metric_kind: str) -> tuple[str, bool]:
    primary = options.metrics.get(metric_kind, PRIMARY[metric_kind])
    metric = primary if options.choose_by == "accuracy" else options.choose_by
    return metric, metric == primary and get_metric(metric).greater_is_better


def _table_leaders(survey: Survey, result: ExperimentResult, options: ScoreOptions,
                   scored: Sequence[str]) -> dict[str, str]:
    """Per kind of metric, the method with the best mean score over every scored column.

    Only methods that scored every such column compete; the mean is over columns of each
    column's mean over draws, so every column counts once.
    """
    leaders = {}
    scores = result.scores
    for metric_kind in ("numeric", "categorical"):
        names = [n for n in scored
                 if ("numeric" if survey.columns[n].spec.kind in ("numeric", "datetime")
                     else "categorical") == metric_kind]
        metric, greater = _metric_for(options, metric_kind)
        part = scores[scores["column"].isin(names)]
        if not names or metric not in part:
            continue
        table = part.groupby(["method", "column"])[metric].mean().unstack("column")
        table = table.reindex(columns=names).dropna()
        if not len(table):
            continue
        means = table.mean(axis=1)
        leaders[metric_kind] = str(means.idxmax() if greater else means.idxmin())
    return leaders


def _table_choice(rows: pd.DataFrame, metric: str, usable: dict[str, tuple[float, float]],
                  greater: bool, leader: str) -> tuple[str, str]:
    """The table's leading method, unless one beats it here by two paired SEs."""
    sign = -1.0 if greater else 1.0
    best = min(usable, key=lambda m: sign * usable[m][0])
    text = f"{leader} has the best mean {metric} over the table's columns"
    if best == leader:
        return leader, f"{text} and on this one ({usable[leader][0]:.4g})"
    se = _paired_se(rows, metric, usable, greater, against=best)[leader]
    gap = sign * (usable[leader][0] - usable[best][0])
    if gap > 2 * se:
        return best, (f"{best} beats the table's leader {leader} on this column by "
                      f"{gap:.3g} {metric}, more than two paired standard errors ({se:.2g})")
    return leader, (f"{text}; {best} is ahead here by {gap:.3g}, within two paired standard "
                    f"errors ({se:.2g}), so the leader is kept")


def _paired_se(rows: pd.DataFrame, metric: str, usable: dict[str, tuple[float, float]],
               greater: bool, against: str | None = None) -> dict[str, float]:
    """SE of each method's per-draw difference from the best method, on common draws."""
    sign = -1.0 if greater else 1.0
    best = against or min(usable, key=lambda m: sign * usable[m][0])
    table = rows.pivot_table(index=["mask", "repeat"], columns="method", values=metric,
                             aggfunc="mean")
    out = {}
    for method in usable:
        if method not in table or best not in table:
            out[method] = 0.0
            continue
        diff = (table[method] - table[best]).to_numpy(float)
        diff = diff[np.isfinite(diff)]
        out[method] = float(diff.std(ddof=1) / math.sqrt(len(diff))) if len(diff) > 1 else 0.0
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
    leaders = (_table_leaders(survey, result, options, scored)
               if options.choice_rule == "table" and result is not None and len(result.scores)
               else {})
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
            primary = options.metrics.get(metric_kind, PRIMARY[metric_kind])
            metric = primary if options.choose_by == "accuracy" else options.choose_by
            rows = result.scores[result.scores["column"] == name]
            summary = _summary(rows, [primary, metric], options.masks)
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
            greater = metric == primary and get_metric(metric).greater_is_better
            leader = leaders.get(metric_kind)
            if leader is not None and leader in usable:
                chosen, why = _table_choice(rows, metric, usable, greater, leader)
            else:
                paired = (_paired_se(rows, metric, usable, greater)
                          if options.choice_rule != "unpaired" else None)
                chosen, why = choose_method(usable, simplicity, metric=metric,
                                            greater_is_better=greater, order=methods,
                                            paired_se=paired)
            why += _distribution_note(summary, chosen, metric_kind)
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
        if plan.method == "blend" and result is not None and result.blend:
            plan.params.update(weights=dict(result.blend["weights"]),
                               label_method=result.blend["label_method"])
            weights = ", ".join(f"{m} {w:.2f}" for m, w in result.blend["weights"].items())
            plan.reason += f"; blend weights (fitted on every draw's hidden cells): {weights}"
        plan.evidence = dict(col.evidence)
        if action == "impute":
            _apply_evidence(plan, col, survey.typed[name])
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
        "choose_by": options.choose_by,
        "choice": _choice_words(options),
        "choice_rule": options.choice_rule,
        "drop_threshold": options.survey.drop_threshold,
        "sample": options.sample,
        "experiment_rows": sample_rows,
        "target": target,
        "use_target": options.use_target,
        "imputelab_version": _version(),
    }
    checks = survey.evidence.table_dict() if survey.evidence is not None else {}
    table_wide = {"checks": survey.evidence is not None,
                  **{k: checks[k] for k in ("mcar_test", "co_missing") if k in checks}}
    return Plan(source=source, settings=settings, columns=columns, survey=table_wide)


def _apply_evidence(plan: ColumnPlan, col: ColumnSurvey, values: pd.Series) -> None:
    """Carry the survey's evidence into the reason; fill structural blanks with a constant."""
    check = col.evidence.get("missingness")
    notes = []
    if check and check.get("auc") is not None:
        drivers = f", drivers: {', '.join(check['drivers'])}" if check["drivers"] else ""
        notes.append(f"blanks: {check['verdict']} (AUC {check['auc']:.2f}, 95% "
                     f"{check['auc_low']:.2f}-{check['auc_high']:.2f}{drivers})")
    elif check:
        notes.append(f"blanks: {check['verdict']}")
    notes.extend(col.evidence.get("hints", []))
    rules = col.evidence.get("structural") or []
    rule = rules[0] if rules else None
    if rule is not None and METHODS["constant"].unsupported_reason(plan.kind,
                                                                    values.dtype) is None:
        value = _structural_value(rule, plan.kind)
        plan.method, plan.params = "constant", {"value": value}
        observed = pd.to_numeric(values, errors="coerce") if plan.kind == "numeric" else None
        outside = observed is not None and not (observed.min() <= value <= observed.max())
        stands = (f"the new label '{value}'" if isinstance(value, str) else
                  f"{value:g}" + (", outside every observed value" if outside else ""))
        text = (f"structural blank: blank when {rule['when']} ({rule['support']} rows, "
                f"{rule['confidence']:.0%} of them blank), so the value does not apply; "
                f"filled with {stands}")
        if plan.kind == "numeric":
            # A number standing for "does not apply" must stay tellable from a measurement.
            plan.indicator = True
            text += "; the indicator column tells these rows apart"
        if rule["unexplained"]:
            text += (f". {rule['unexplained']} other blank(s) fall outside the rule: likely "
                     "true missing values, filled with the same constant; change the method "
                     "to model them")
        plan.reason = text + (f" [experiment: {plan.reason}]" if plan.reason else "")
    if notes:
        plan.reason += ". " + "; ".join(notes)


def _structural_value(rule: dict[str, Any], kind: str) -> float | str:
    """What a structural blank stands for: the label 'absent', or 0 for numbers."""
    if kind in ("binary", "categorical"):
        return ABSENT_LABEL
    return 0.0


def _distribution_note(summary: dict[str, dict], chosen: str, metric_kind: str) -> str:
    """A few words on how the chosen method keeps the column's spread and correlations."""
    entry = summary[chosen]
    if metric_kind != "numeric":
        tv = entry.get("total_variation")
        return "" if tv is None else f"; label frequencies shift by {tv:.2g} (total variation)"
    parts = []
    ratio = entry.get("variance_ratio")
    if ratio is not None and math.isfinite(ratio):
        parts.append(f"fills keep {ratio:.0%} of the hidden values' variance")
    shift = entry.get("corr_shift")
    if shift is not None and math.isfinite(shift):
        parts.append(f"correlations move by {shift:.2g} on average")
    return "; " + ", ".join(parts) if parts else ""


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
        survey's checks and the model experiment run here, with ``options.n_jobs``.

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
    if options.masks is None:
        holes = bool(len(scored)) and bool(working[scored].isna().to_numpy().any())
        options = replace(options, masks=DEFAULT_MASKS + (("pattern",) if holes else ()))
    result = None
    if scored:
        methods = {m: {} for m in (options.methods or get_method_names())}
        result = run_experiment(
            working, encoding.kinds, scored, methods=methods, masks=options.masks,
            rate=options.rate, repeats=options.repeats, seed=options.seed,
            dtypes=dict(survey.typed.dtypes), n_jobs=options.n_jobs, progress=progress,
            executor=executor,
        )
    plan = plan_from_experiment(survey, result, options, actions=actions, scored=scored,
                                sample_rows=len(working))
    if target is not None and options.downstream and targets:
        _downstream(plan, survey, encoding, targets, options, progress)
    return plan, survey, result


def _downstream(plan: Plan, survey: Survey, encoding: Encoding, targets: list[str],
                options: ScoreOptions, progress: Callable[[int, int], None] | None) -> None:
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
        progress=progress,
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
