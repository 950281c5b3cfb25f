"""The words of a plan's reasons: fallbacks, the survey's evidence, structural blanks."""

from __future__ import annotations

import math
from typing import Any

import pandas as pd

from imputelab.methods import METHODS
from imputelab.score.options import MIN_OBSERVED
from imputelab.score.plan import ColumnPlan
from imputelab.survey.diagnostics import ABSENT_LABEL
from imputelab.survey.table import ColumnSurvey

__all__ = ["apply_evidence", "distribution_note", "fallback", "structural_value"]


def fallback(kind: str, values: pd.Series, why: str | None = None) -> tuple[str, str]:
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


def apply_evidence(plan: ColumnPlan, col: ColumnSurvey, values: pd.Series) -> None:
    """Carry the survey's evidence into the reason; record a structural rule with its value."""
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
        value, stands = structural_value(plan.kind, values, col.spec)
        plan.structural = {"when": rule["when"], "other": rule["other"], "op": rule["op"],
                           "values": list(rule["values"]), "value": value}
        text = (f"structural blank: blank when {rule['when']} ({rule['support']} rows, "
                f"{rule['confidence']:.0%} of them blank), so the value does not apply; fill "
                f"writes {stands} in the blanks where that holds")
        if plan.kind == "numeric":
            # A number standing for "does not apply" must stay tellable from a measurement.
            plan.indicator = True
            text += "; the indicator column tells these rows apart"
        others = (f"{rule['unexplained']} blank(s) outside the rule, likely true missing "
                  "values" if rule["unexplained"] else "none outside the rule here")
        plan.reason = (f"{text}. The column's other blanks ({others}) get {plan.method}: "
                       f"{plan.reason}")
    if notes:
        plan.reason += ". " + "; ".join(notes)


def structural_value(kind: str, values: pd.Series, spec: Any) -> tuple[float | str, str]:
    """What a structural blank stands for, and those words for the reason.

    Labels: the new label :data:`ABSENT_LABEL`. Numbers: 0 where 0 lies within the observed
    range or less than the range's width away from it (no garage, no garage area); otherwise
    0 would be absurd (a build year of 0 among 1900-2010), and the stand-in is one unit of the
    column's rounding below the smallest observed value (common practice, no source).
    """
    if kind in ("binary", "categorical"):
        return ABSENT_LABEL, f"the new label '{ABSENT_LABEL}'"
    observed = pd.to_numeric(values, errors="coerce").dropna()
    if not len(observed):
        return 0.0, "0"
    low, high = float(observed.min()), float(observed.max())
    width = high - low
    if low - width <= 0.0 <= high + width:
        where = "within" if low <= 0.0 <= high else "next to (less than its width away)"
        return 0.0, f"0 ({where} the observed range {low:g} to {high:g})"
    # Whole numbers written with a decimal point ("1995.0") still step by 1.
    whole = spec.integer or bool((observed == observed.round()).all())
    unit = 1.0 if whole else 10.0 ** -spec.decimals
    value = float(f"{low - unit:.12g}")
    return value, (f"{value:g}, one unit ({unit:g}) below the smallest observed value "
                   f"{low:g}, outside every observed value (0 is far from the observed range "
                   f"{low:g} to {high:g})")


def distribution_note(summary: dict[str, dict], chosen: str, metric_kind: str) -> str:
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
