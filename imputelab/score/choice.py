"""The choice rules: per-method summaries, the table's leader, the paired standard errors."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd

from imputelab.metrics.scores import PRIMARY, get_metric
from imputelab.score.experiment import ExperimentResult
from imputelab.score.options import ScoreOptions
from imputelab.survey.table import Survey

__all__ = ["choice_words", "metric_for", "metric_kind", "paired_se", "summarise_scores",
           "table_choice", "table_leaders"]

_CHOICE_WORDS = {
    "accuracy": "primary metric",
    "distribution": "distribution score (wasserstein + corr_shift; total variation for labels)",
    "balanced": "balanced score (mean of nrmse or pfc and the distribution score)",
}


def summarise_scores(scores: pd.DataFrame, metrics: Sequence[str],
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


def choice_words(options: ScoreOptions) -> str:
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


def metric_for(options: ScoreOptions, metric_kind: str) -> tuple[str, bool]:
    primary = options.metrics.get(metric_kind, PRIMARY[metric_kind])
    metric = primary if options.choose_by == "accuracy" else options.choose_by
    return metric, metric == primary and get_metric(metric).greater_is_better


def table_leaders(survey: Survey, result: ExperimentResult, options: ScoreOptions,
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
        metric, greater = metric_for(options, metric_kind)
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


def table_choice(rows: pd.DataFrame, metric: str, usable: dict[str, tuple[float, float]],
                  greater: bool, leader: str) -> tuple[str, str]:
    """The table's leading method, unless one beats it here by two paired SEs."""
    sign = -1.0 if greater else 1.0
    # A tie with the leader is no lead: the leader is the best here too.
    best = min(usable, key=lambda m: (sign * usable[m][0], m != leader))
    text = f"{leader} has the best mean {metric} over the table's columns"
    if best == leader:
        return leader, f"{text} and on this one ({usable[leader][0]:.4g})"
    se = paired_se(rows, metric, usable, greater, against=best)[leader]
    gap = sign * (usable[leader][0] - usable[best][0])
    if gap > 2 * se:
        return best, (f"{best} beats the table's leader {leader} on this column by "
                      f"{gap:.3g} {metric}, more than two paired standard errors ({se:.2g})")
    return leader, (f"{text}; {best} is ahead here by {gap:.3g}, within two paired standard "
                    f"errors ({se:.2g}), so the leader is kept")


def paired_se(rows: pd.DataFrame, metric: str, usable: dict[str, tuple[float, float]],
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


def metric_kind(kind: str) -> str:
    """``numeric`` for numbers and timestamps, ``categorical`` for labels."""
    return "numeric" if kind in ("numeric", "datetime") else "categorical"
