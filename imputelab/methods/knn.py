"""K nearest neighbours on standardised numbers and one-hot labels."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from sklearn.impute import KNNImputer
from sklearn.utils import check_random_state

from imputelab.frame.encoding import is_categorical
from imputelab.methods.base import FillMethod
from imputelab.methods.design import Design, column_stats, frequent_levels
from imputelab.methods.state import export_knn, import_knn

__all__ = ["KNNFill"]


class KNNFill(FillMethod):
    """Fill each hole from the ``n_neighbors`` most similar rows that have the value.

    Distances are scikit-learn's NaN-aware Euclidean distances over standardised numeric
    columns and one-hot label columns (Troyanskaya et al. 2001, *Bioinformatics* 17(6):520-525,
    for the method; scikit-learn's ``KNNImputer`` does the work). A label is the most common
    label among the neighbours (the largest averaged one-hot entry).

    Parameters
    ----------
    n_neighbors : int, default=5
    max_donors : int, default=1000
        Neighbours are searched among at most this many rows, drawn at random, which bounds
        the cost on large tables.
    random_state : int, optional
        Seeds the draw of donor rows.
    """

    name = "knn"
    simplicity = 2
    max_labels = 50
    source = "Troyanskaya et al. (2001), Bioinformatics 17(6):520-525"

    def __init__(self, n_neighbors: int = 5, max_donors: int = 1000, random_state=None):
        self.n_neighbors = n_neighbors
        self.max_donors = max_donors
        self.random_state = random_state

    def _fit(self, X: pd.DataFrame, targets: list[str]) -> None:
        rng = check_random_state(self.random_state)
        self.stats_ = column_stats(X)
        self.keep_ = frequent_levels(X)
        design = Design(X, "onehot", self.stats_, self.keep_)
        matrix = design.matrix()
        if len(matrix) > self.max_donors:
            rows = np.sort(rng.choice(len(matrix), self.max_donors, replace=False))
            matrix = matrix[rows]
        self.imputer_ = KNNImputer(n_neighbors=self.n_neighbors, keep_empty_features=True)
        self.imputer_.fit(matrix)

    def _export_state(self) -> dict[str, Any]:
        return {**super()._export_state(), "stats": dict(self.stats_), "keep": dict(self.keep_),
                "imputer": export_knn(self.imputer_)}

    def _import_state(self, state: dict[str, Any]) -> KNNFill:
        super()._import_state(state)
        self.stats_ = {name: tuple(pair) for name, pair in state["stats"].items()}
        self.keep_ = {name: np.asarray(codes) for name, codes in state["keep"].items()}
        self.imputer_ = import_knn(state["imputer"])
        return self

    def _transform(self, X: pd.DataFrame) -> pd.DataFrame:
        design = Design(X, "onehot", self.stats_, self.keep_)
        slices = design.slices()
        need = np.zeros(len(X), bool)
        for name in self.targets_:
            need |= X[name].isna().to_numpy()
        out = X.copy()
        if not need.any():
            return out
        filled = self.imputer_.transform(design.matrix(rows=need))
        rows = np.flatnonzero(need)
        for name in self.targets_:
            block = filled[:, slices[name]]
            column = out[name].copy()
            if is_categorical(column):
                codes = np.argmax(block, axis=1)
                if name in self.keep_:  # the block holds only the frequent labels, in order
                    codes = np.asarray(self.keep_[name])[codes]
                values = pd.Categorical.from_codes(codes, categories=column.cat.categories)
                column.iloc[rows] = values
            else:
                mean, std = self.stats_[name]
                column.iloc[rows] = block[:, 0] * std + mean
            out[name] = column
        return out
