"""Filling a new file with a saved model, after checking the file against what it was fitted on.

A new file is checked before it is filled (:func:`fill_with_model`):

- a column the model uses (imputed or feature) missing from the file is an error; a missing
  column it does not use (passed through or dropped) is a warning;
- a column the model does not know is passed through unchanged, with a warning;
- a column whose values changed sort is an error naming it, with examples: text that is
  neither a number (or a timestamp in the column's format) nor a missing token, or labels of
  another type (numbers where the model saw text);
- labels the model never saw, in observed cells, are counted and handled by ``unseen``:
  ``keep`` (the default: the cell is written as it is, the models read it as unknown),
  ``missing`` (filled as a hole by the column's method) or ``mode`` (the column's most
  frequent training label); an observed cell changes only when the caller asks;
- a column the model uses that is blank in every row is filled entirely, with a warning.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from imputelab.checks import check_choice
from imputelab.errors import DataError
from imputelab.fill.frame import FillReport, clean_with_plan, finish_output
from imputelab.fill.model_format import SavedModel
from imputelab.io.columns import MISSING_TOKENS, new_token_warnings
from imputelab.io.tables import Table

__all__ = ["UNSEEN_CHOICES", "ModelFillReport", "fill_with_model"]

#: What :func:`fill_with_model` does with a label the model never saw, in an observed cell.
UNSEEN_CHOICES = ("keep", "missing", "mode")


@dataclass
class ModelFillReport(FillReport):
    """What a fill with a saved model did: a :class:`FillReport` and the new-file checks.

    Attributes
    ----------
    unseen : dict
        Per label column, labels the model never saw in observed cells, with counts.
    unseen_action : str
        What was done with them (see :data:`UNSEEN_CHOICES`).
    extra_columns : list of str
        Columns the model does not know, passed through unchanged.
    blank_columns : list of str
        Columns the model uses that are blank in every row of the file.
    """

    unseen: dict[str, dict[str, int]] = field(default_factory=dict)
    unseen_action: str = "keep"
    extra_columns: list[str] = field(default_factory=list)
    blank_columns: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict."""
        return {**super().to_dict(), "unseen": self.unseen, "unseen_action": self.unseen_action,
                "extra_columns": self.extra_columns, "blank_columns": self.blank_columns}


def _family(dtype: Any) -> str:
    """The sort of values a column holds; labels only match labels of the same sort."""
    if isinstance(dtype, str):
        try:
            dtype = pd.api.types.pandas_dtype(dtype)
        except TypeError:
            return dtype
    if isinstance(dtype, pd.CategoricalDtype):
        return "category"
    if pd.api.types.is_bool_dtype(dtype):
        return "bool"
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return "datetime"
    if pd.api.types.is_numeric_dtype(dtype):
        return "number"
    if pd.api.types.is_string_dtype(dtype):
        return "text"
    return str(dtype)


def _shown(counts: Mapping[Any, int], limit: int = 5) -> str:
    items = sorted(counts.items(), key=lambda kv: (-kv[1], str(kv[0])))
    text = ", ".join(f"'{k}' ({v})" for k, v in items[:limit])
    return text + (f" and {len(items) - limit} more" if len(items) > limit else "")


def _check_columns(table: Table, model: SavedModel, report: ModelFillReport) -> None:
    columns = list(table.frame.columns)
    used = model.fitted.encoding.columns
    missing = [c for c in model.schema if c not in columns]
    needed = [c for c in missing if c in used]
    if needed:
        raise DataError(f"'{table.path}' lacks column(s) the model uses: {', '.join(needed)}; "
                        "give a file with every column it was fitted on")
    if missing:
        report.warnings.append(f"'{table.path}' lacks column(s) {', '.join(missing)}, which "
                               "the model does not use; the output has none")
    report.extra_columns = [c for c in columns if c not in model.schema]
    if report.extra_columns:
        report.warnings.append(f"column(s) {', '.join(report.extra_columns)} were not in the "
                               "training file; passed through unchanged")


def _check_values(typed: pd.DataFrame, new_tokens: Mapping[str, Mapping[str, int]],
                  model: SavedModel, report: ModelFillReport) -> None:
    """Errors for columns whose values changed sort; warnings for the rest."""
    for name in model.fitted.encoding.columns:
        entry = model.schema[name]
        was, now = _family(entry["dtype"]), _family(typed[name].dtype)
        if was != now and typed[name].notna().any():  # all blank: no values, any type
            sample = ", ".join(f"'{v}'" for v in pd.unique(typed[name].dropna())[:3])
            raise DataError(f"column '{name}' held {was} values when the model was fitted and "
                            f"holds {now} values in this file (e.g. {sample or 'blanks'}); "
                            "give it in the same form")
        if entry["kind"] in ("numeric", "datetime"):
            found = new_tokens.get(name, {})
            strange = {t: c for t, c in found.items()
                       if t.strip().lower() not in MISSING_TOKENS}
            if strange:
                what = "a number" if entry["kind"] == "numeric" else "a timestamp"
                raise DataError(f"column '{name}' was {entry['kind']} when the model was fitted, "
                                f"but this file holds text that is neither {what} nor a known "
                                f"missing token: {_shown(strange)}; fix those cells, or record "
                                "them as missing codes in the plan and fit again")
    report.warnings.extend(new_token_warnings(new_tokens))
    for name in model.fitted.encoding.columns:
        if typed[name].isna().all():
            report.blank_columns.append(name)
    if report.blank_columns:
        report.warnings.append(f"column(s) {', '.join(report.blank_columns)} are blank in every "
                               "row of this file; every value the model fills there is an "
                               "estimate, none is measured")


def _unseen_cells(typed: pd.DataFrame, model: SavedModel) -> dict[str, np.ndarray]:
    cells = {}
    for name, labels in model.fitted.encoding.categories.items():
        column = typed[name]
        # the same test Encoding.encode applies: these cells are unknown to every model
        unknown = (~column.astype(object).isin(labels) & column.notna()).to_numpy(bool)
        if unknown.any():
            cells[name] = unknown
    return cells


def fill_with_model(
    table: Table,
    model: SavedModel,
    *,
    unseen: str = "keep",
    text_output: bool = True,
) -> tuple[pd.DataFrame, ModelFillReport]:
    """Check a new table against a saved model, clean it by the model's plan and fill it.

    The methods are not refitted. The output is built exactly as :func:`imputelab.fill.frame.
    fill_table` builds it, so on the training file both give the same table.

    Parameters
    ----------
    table : Table
    model : SavedModel
    unseen : {"keep", "missing", "mode"}
        What to do with an observed label the model never saw, in a column it imputes:
        ``keep`` writes the cell as it is (the models read it as unknown when they fill the
        other columns), ``missing`` treats it as a hole and fills it by the column's method,
        ``mode`` replaces it by the column's most frequent training label. Replaced cells are
        counted in the report and flagged 1 in the column's ``__was_missing`` indicator.
        Labels of columns that only serve as features (the target) are always kept.
    text_output : bool
        As in :func:`imputelab.fill.frame.fill_table`: the original text with the filled
        cells rewritten (CSV input, for CSV output), or the typed frame.

    Returns
    -------
    frame : DataFrame
    report : ModelFillReport

    Raises
    ------
    DataError
        For a missing column the model uses, or a column whose values changed sort.
    """
    check_choice(unseen, "unseen", UNSEEN_CHOICES)
    plan, fitted = model.plan, model.fitted
    report = ModelFillReport(unseen_action=unseen)
    report.warnings.extend(model.warnings)
    _check_columns(table, model, report)
    typed, report.new_tokens = clean_with_plan(table, plan)
    _check_values(typed, report.new_tokens, model, report)
    before = typed
    for name, cells in _unseen_cells(typed, model).items():
        column = typed[name]
        report.unseen[name] = {str(k): int(v) for k, v in
                               column[cells].astype(object).value_counts().items()}
        if unseen == "keep" or name not in fitted.targets:
            continue
        hole = column.mask(pd.Series(cells, index=column.index))
        before = before.assign(**{name: hole})
        if unseen == "missing":
            typed = typed.assign(**{name: hole})
        elif model.schema[name].get("mode") is not None:
            typed = typed.assign(**{name: column.mask(pd.Series(cells, index=column.index),
                                                      model.schema[name]["mode"])})
    if report.unseen:
        done = {"keep": "kept as written (unknown to the models)",
                "missing": "treated as holes and filled",
                "mode": "replaced by the column's most frequent training label"}[unseen]
        for name, counts in report.unseen.items():
            how = done if name in fitted.targets else "kept as written (a feature only)"
            report.warnings.append(f"column '{name}': {sum(counts.values())} cell(s) hold labels "
                                   f"the model never saw: {_shown(counts)}; {how}")
    planned = [c for c in typed.columns if c in plan.columns]
    filled = fitted.apply(typed[planned], report)
    # ``before`` holds the replaced labels as holes: they are flagged and written as filled.
    # Columns the model does not know pass through in place (they are the same in both).
    return finish_output(table, plan, before, filled, text_output=text_output), report
