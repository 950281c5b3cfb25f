"""One statistic per column: mean, median, most frequent value, or a constant."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from imputelab.frame.encoding import is_categorical
from imputelab.methods.base import FillMethod

__all__ = ["ConstantFill", "MeanFill", "MedianFill", "ModeFill"]

NUMERIC_KINDS = frozenset({"numeric", "datetime"})


def most_frequent(column: pd.Series) -> Any:
    """Most frequent observed value; ties go to the smallest, as scikit-learn's SimpleImputer."""
    if is_categorical(column):
        counts = np.bincount(column.cat.codes.to_numpy()[column.notna().to_numpy()],
                             minlength=len(column.cat.categories))
        return column.cat.categories[int(np.argmax(counts))] if counts.sum() else np.nan
    values = column.dropna().to_numpy(float)
    if not len(values):
        return np.nan
    uniques, counts = np.unique(values, return_counts=True)
    return float(uniques[int(np.argmax(counts))])


class _StatisticFill(FillMethod):
    """Fill each target column with one learned value."""

    uses_other_columns = False

    def _statistic(self, column: pd.Series) -> Any:
        raise NotImplementedError

    def _fit(self, X: pd.DataFrame, targets: list[str]) -> None:
        self.statistics_ = {name: self._statistic(X[name]) for name in targets}

    def _export_state(self) -> dict[str, Any]:
        return {**super()._export_state(), "statistics": dict(self.statistics_)}

    def _import_state(self, state: dict[str, Any]) -> _StatisticFill:
        super()._import_state(state)
        self.statistics_ = dict(state["statistics"])
        return self

    def _transform(self, X: pd.DataFrame) -> pd.DataFrame:
        out = X.copy()
        for name, value in self.statistics_.items():
            column = out[name]
            if is_categorical(column) and value is not np.nan and value not in (
                column.cat.categories
            ):
                column = column.cat.add_categories([value])
            out[name] = column.fillna(value)
        return out


class MeanFill(_StatisticFill):
    """Fill numeric columns with their observed mean.

    Examples
    --------
    >>> X = pd.DataFrame({"a": [1.0, np.nan, 3.0]})
    >>> MeanFill().fit_transform(X)["a"].tolist()
    [1.0, 2.0, 3.0]
    """

    name = "mean"
    kinds = NUMERIC_KINDS
    simplicity = 1
    source = "textbook; e.g. Little & Rubin (2019), Statistical Analysis with Missing Data, 3rd ed."

    def _statistic(self, column: pd.Series) -> Any:
        values = column.to_numpy(float)
        return float(np.nanmean(values)) if np.isfinite(values).any() else np.nan


class MedianFill(_StatisticFill):
    """Fill numeric columns with their observed median."""

    name = "median"
    kinds = NUMERIC_KINDS
    simplicity = 1
    source = MeanFill.source

    def _statistic(self, column: pd.Series) -> Any:
        values = column.to_numpy(float)
        return float(np.nanmedian(values)) if np.isfinite(values).any() else np.nan


class ModeFill(_StatisticFill):
    """Fill any column with its most frequent observed value (ties: the smallest)."""

    name = "mode"
    simplicity = 1
    source = MeanFill.source

    def _statistic(self, column: pd.Series) -> Any:
        return most_frequent(column)


class ConstantFill(_StatisticFill):
    """Fill with a constant: ``value``, or 0 for numbers and a new label for categories.

    Parameters
    ----------
    value : float or str, optional
        The fill value; by default 0 for numeric columns and ``missing_label`` for label columns.
    missing_label : str, default="missing"
        The new category used for label columns when ``value`` is not given.
    """

    name = "constant"
    kinds = frozenset({"numeric", "binary", "categorical"})
    simplicity = 0
    source = "common practice, no source"

    def __init__(self, value: float | str | None = None, missing_label: str = "missing"):
        self.value = value
        self.missing_label = missing_label

    @classmethod
    def unsupported_reason(cls, kind: str, dtype: Any = None,
                           n_labels: int | None = None) -> str | None:
        reason = super().unsupported_reason(kind, dtype, n_labels)
        if reason is None and kind in ("binary", "categorical") and dtype is not None and not (
            pd.api.types.is_string_dtype(dtype) and not isinstance(dtype, pd.CategoricalDtype)
        ):
            return "constant adds a new label, which this column's type cannot hold"
        return reason

    def _statistic(self, column: pd.Series) -> Any:
        if self.value is not None:
            return self.value
        return self.missing_label if is_categorical(column) else 0.0
