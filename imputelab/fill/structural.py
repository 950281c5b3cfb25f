"""Structural blanks at fill time: the plan's stand-in where the rule's condition holds.

A column with a structural rule in its plan (``ColumnPlan.structural``) is filled by its
method like any other; then :func:`apply_structural` writes the rule's stand-in ``value`` into
the cells that were blank in the cleaned table *and* satisfy the condition (``OTHER == v``,
``OTHER in {...}``, ``OTHER is blank``, read on the cleaned table as the survey read it). The
column's other blanks keep the method's fill. Observed cells never change.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from imputelab.errors import PlanError
from imputelab.score.plan import Plan

__all__ = ["apply_structural"]


def _condition(other: pd.Series, op: str, values: list) -> np.ndarray:
    if op == "is blank":
        return other.isna().to_numpy()
    wanted = values[:1] if op == "==" else values
    if pd.api.types.is_numeric_dtype(other) and not pd.api.types.is_bool_dtype(other):
        numbers = other.to_numpy(float, na_value=np.nan)
        return np.isin(numbers, np.asarray(wanted, dtype=float))
    return other.astype(object).isin(wanted).to_numpy() & other.notna().to_numpy()


def apply_structural(plan: Plan, typed: pd.DataFrame, filled: pd.DataFrame) -> pd.DataFrame:
    """Put each structural column's stand-in into its blanks where the rule holds.

    Parameters
    ----------
    plan : Plan
    typed : DataFrame
        The cleaned table before filling (its blanks and the condition's column).
    filled : DataFrame
        The same rows filled by the plan's methods (dropped columns may be gone).

    Returns
    -------
    DataFrame
        ``filled`` with the stand-ins written; dtypes kept (a label column that is not of a
        label dtype becomes object to hold the new label).
    """
    out = filled
    for name, col in plan.columns.items():
        rule = col.structural
        if rule is None or col.action != "impute" or name not in out.columns:
            continue
        if rule["other"] not in typed.columns:
            raise PlanError(f"plan: column '{name}': its structural rule is on column "
                            f"'{rule['other']}', which the table does not have")
        rows = typed[name].isna().to_numpy() & _condition(typed[rule["other"]], rule["op"],
                                                          list(rule["values"]))
        if not rows.any():
            continue
        out = out.copy() if out is filled else out
        out[name] = _put(out[name], rows, rule["value"])
    return out


def _put(column: pd.Series, rows: np.ndarray, value: object) -> pd.Series:
    column = column.copy()
    if isinstance(column.dtype, pd.CategoricalDtype):
        if value not in column.cat.categories:
            column = column.cat.add_categories([value])
    elif isinstance(value, str) and not pd.api.types.is_object_dtype(column.dtype) \
            and not pd.api.types.is_string_dtype(column.dtype):
        column = column.astype(object)
    elif pd.api.types.is_integer_dtype(column.dtype):
        value = int(round(float(value)))  # type: ignore[arg-type]
    column.iloc[np.flatnonzero(rows)] = value
    return column
