"""The target check's summaries: means and paired gaps per candidate, indicator importances."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from imputelab.score.target_models import MODELS, NO_FILL, NOT_APPLICABLE

__all__ = ["INDICATOR_RULE", "indicator_source", "indicator_summary", "mean_se", "plain",
           "summarise"]

INDICATOR_RULE = ("recommend an indicator when the mean permutation importance over the "
                  "held-out folds is above 0 and above 2 standard errors (common practice, "
                  "no source)")


def plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain(v) for v in value]
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    return value


def mean_se(values: np.ndarray) -> tuple[float, float]:
    if len(values) == 0:
        return math.nan, math.nan
    se = float(values.std(ddof=1) / math.sqrt(len(values))) if len(values) > 1 else math.nan
    return float(values.mean()), se


def summarise(scores: pd.DataFrame, order: list[str], n_splits: int
               ) -> tuple[dict[str, dict[str, Any]], dict[str, str | None]]:
    """Per candidate and model: mean, SE, folds; then the best and the paired gaps to it."""
    candidates: dict[str, dict[str, Any]] = {}
    per_fold: dict[tuple[str, str], np.ndarray] = {}
    for candidate in order:
        method = None if candidate == NO_FILL else candidate.removesuffix(" + indicators")
        entry: dict[str, Any] = {"method": method, "indicators": candidate.endswith(
            " + indicators")}
        for model in MODELS:
            if candidate == NO_FILL and model == "linear":
                entry[model] = {"applicable": False, "reason": NOT_APPLICABLE}
                continue
            part = scores[(scores["candidate"] == candidate) & (scores["model"] == model)]
            values = np.full(n_splits, np.nan)
            values[part["fold"].to_numpy(int)] = part["score"].to_numpy(float)
            finite = values[np.isfinite(values)]
            mean, se = mean_se(finite)
            complete = len(finite) == n_splits
            if complete:
                per_fold[(candidate, model)] = values
            entry[model] = {"applicable": True, "mean": mean, "se": se,
                            "folds": int(len(finite)), "complete": complete,
                            "per_fold": [float(v) for v in values],
                            "gap_to_best": None, "gap_se": None}
        candidates[candidate] = entry
    best: dict[str, str | None] = {}
    for model in MODELS:
        ranked = [(c, candidates[c][model]["mean"]) for c in order if (c, model) in per_fold]
        top = max(ranked, key=lambda item: item[1], default=None)  # first of equals wins
        best[model] = None if top is None else top[0]
        if top is None:
            continue
        for candidate in order:
            if (candidate, model) in per_fold:
                gap = per_fold[(top[0], model)] - per_fold[(candidate, model)]
                mean, se = mean_se(gap)
                candidates[candidate][model]["gap_to_best"] = mean
                candidates[candidate][model]["gap_se"] = se
    return candidates, best


def indicator_source(candidates: Mapping[str, Mapping[str, Any]],
                      plan: Mapping[str, Any]) -> str | None:
    """The best complete ``M + indicators`` candidate with LightGBM (first of equals)."""
    flagged = [f"{m} + indicators" for m in plan
               if candidates[f"{m} + indicators"]["lightgbm"]["complete"]]
    return max(flagged, key=lambda c: candidates[c]["lightgbm"]["mean"], default=None)


def indicator_summary(importances: Mapping[int, Mapping[str, float]]
                       ) -> dict[str, dict[str, Any]]:
    """Mean and SE over folds of each indicator's importance, and the recommendation."""
    columns: list[str] = []
    for fold in sorted(importances):
        columns += [c for c in importances[fold] if c not in columns]
    out = {}
    for column in columns:
        values = np.array([importances[f][column] for f in sorted(importances)
                           if column in importances[f]])
        mean, se = mean_se(values)
        recommend = bool(len(values) > 1 and mean > 0 and mean > 2 * se)
        out[column] = {"importance": mean, "se": se, "folds": int(len(values)),
                       "recommend": recommend}
    return out
