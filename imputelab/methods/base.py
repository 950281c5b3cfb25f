"""The contract every fill method keeps.

A method works on a working frame (see :mod:`imputelab.frame.encoding`): ``float64`` columns and
unordered ``Categorical`` columns. ``fit(X, targets)`` learns how to fill the ``targets``
columns (every other column may serve as a feature); ``transform(X)`` returns a copy of ``X``
in which only the missing cells of those columns have changed.
"""

from __future__ import annotations

import abc
from collections.abc import Callable, Sequence
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator
from sklearn.utils.validation import check_is_fitted

from imputelab.errors import DataError

__all__ = ["FillMethod"]


class FillMethod(BaseEstimator, abc.ABC):
    """Base class of fill methods.

    Class attributes
    ----------------
    name : str
        Registry key, used on the command line, in plans and in reports.
    kinds : frozenset of str
        Column kinds the method can fill.
    simplicity : int
        Rank in the simplicity order (lower is simpler); ties are broken by score.
    max_labels : int or None
        Most labels a label column may have for this method to model it.
    source : str
        Where the method is published.
    uses_other_columns : bool
        Whether a column's fill depends on the other columns (a model) or not (a statistic).
    """

    name: ClassVar[str]
    kinds: ClassVar[frozenset[str]] = frozenset({"numeric", "binary", "categorical", "datetime"})
    simplicity: ClassVar[int]
    source: ClassVar[str] = ""

    max_labels: ClassVar[int | None] = None
    #: False for a method that fills each column from that column alone (a statistic): fill
    #: then fits it on the columns it was chosen for only.
    uses_other_columns: ClassVar[bool] = True

    @classmethod
    def unsupported_reason(cls, kind: str, dtype: Any = None,
                           n_labels: int | None = None) -> str | None:
        """Why this method cannot fill a column (``None`` when it can).

        Parameters
        ----------
        kind : str
            The column's kind.
        dtype : dtype, optional
            The column's type in the table.
        n_labels : int, optional
            Number of labels of a label column.
        """
        if kind not in cls.kinds:
            return f"{cls.name} does not fill {kind} columns"
        if cls.max_labels is not None and n_labels is not None and n_labels > cls.max_labels:
            return (f"{cls.name} models at most {cls.max_labels} labels; this column has "
                    f"{n_labels}")
        return None

    def fit(self, X: pd.DataFrame, targets: Sequence[str] | None = None) -> FillMethod:
        """Learn how to fill the ``targets`` columns of ``X``.

        Parameters
        ----------
        X : DataFrame
            Working frame.
        targets : sequence of str, optional
            Columns to fill; all columns by default.

        Returns
        -------
        self
        """
        self._validate(X, targets)
        self._fit(X, self.targets_)
        return self

    def transform(self, X: pd.DataFrame) -> pd.DataFrame:
        """Fill the missing cells of the fitted target columns.

        Returns
        -------
        DataFrame
            A copy of ``X``; observed cells are unchanged.
        """
        return self._replay(X, self._transform)

    def fit_transform(self, X: pd.DataFrame, targets: Sequence[str] | None = None) -> pd.DataFrame:
        """Fit on ``X`` and fill it."""
        return self.fit(X, targets).transform(X)

    # -- helpers for subclasses -------------------------------------------------------------
    def _validate(self, X: pd.DataFrame, targets: Sequence[str] | None) -> None:
        if not isinstance(X, pd.DataFrame):
            raise DataError(f"{self.name}: expected a DataFrame, got {type(X).__name__}")
        if len(X) == 0:
            raise DataError(f"{self.name}: the table has no rows")
        targets = list(X.columns if targets is None else targets)
        unknown = [t for t in targets if t not in X.columns]
        if unknown:
            raise DataError(f"{self.name}: columns not in the table: {', '.join(unknown)}")
        for name in targets:
            labels = isinstance(X[name].dtype, pd.CategoricalDtype)
            reason = self.unsupported_reason(
                "categorical" if labels else "numeric",
                n_labels=len(X[name].cat.categories) if labels else None,
            )
            if reason:
                raise DataError(f"column '{name}': {reason}")
        self.targets_ = targets
        self.feature_names_in_ = np.asarray(X.columns, dtype=object)

    def _replay(self, X: pd.DataFrame,
                fill: Callable[[pd.DataFrame], pd.DataFrame]) -> pd.DataFrame:
        """``fill(X)`` by the fitted method, with every observed cell of ``X`` kept."""
        check_is_fitted(self, "targets_")
        self._check_columns(X)
        return self._keep_observed(X, fill(X))

    def _check_columns(self, X: pd.DataFrame) -> None:
        missing = [c for c in self.feature_names_in_ if c not in X.columns]
        if missing:
            raise DataError(f"{self.name}: columns seen in fit are missing: {', '.join(missing)}")

    def _keep_observed(self, X: pd.DataFrame, filled: pd.DataFrame) -> pd.DataFrame:
        out = X.copy()
        for name in self.targets_:
            holes = X[name].isna().to_numpy()
            if holes.any():
                column = out[name].copy()
                new = filled[name]
                if isinstance(column.dtype, pd.CategoricalDtype):
                    extra = [c for c in new.cat.categories if c not in column.cat.categories]
                    if extra:
                        column = column.cat.add_categories(extra)
                column.iloc[np.flatnonzero(holes)] = new.iloc[np.flatnonzero(holes)]
                out[name] = column
        return out

    # -- saved models (see imputelab.methods.state) ------------------------------------------
    def _export_state(self) -> dict[str, Any]:
        """The fitted state as plain data: dicts, lists, scalars, numpy arrays, booster text.

        Subclasses add their own fitted attributes to this dict.
        """
        check_is_fitted(self, "targets_")
        return {"targets": list(self.targets_),
                "features": [str(c) for c in self.feature_names_in_]}

    def _import_state(self, state: dict[str, Any]) -> FillMethod:
        """Set the fitted state written by :meth:`_export_state` on this unfitted method."""
        self.targets_ = list(state["targets"])
        self.feature_names_in_ = np.asarray(state["features"], dtype=object)
        return self

    @abc.abstractmethod
    def _fit(self, X: pd.DataFrame, targets: list[str]) -> None: ...

    @abc.abstractmethod
    def _transform(self, X: pd.DataFrame) -> pd.DataFrame: ...
