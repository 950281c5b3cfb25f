"""Numeric design matrices built from a working frame, one block per column.

Linear models and nearest neighbours need numbers: numeric columns are standardised with
statistics learned once, label columns become one-hot blocks (``onehot``) or integer codes
(``codes``, enough for trees). Blocks are kept per column so a chain can replace one column's
block after filling it without rebuilding the rest.
"""

from __future__ import annotations

from collections.abc import Collection

import numpy as np
import pandas as pd

from imputelab.encoding import is_categorical

__all__ = ["Design", "column_stats"]


def column_stats(X: pd.DataFrame) -> dict[str, tuple[float, float]]:
    """Observed mean and standard deviation (ddof=0; 1 where it is 0) of numeric columns."""
    stats = {}
    for name in X.columns:
        if is_categorical(X[name]):
            continue
        values = X[name].to_numpy(float)
        finite = values[np.isfinite(values)]
        mean = float(finite.mean()) if len(finite) else 0.0
        std = float(finite.std()) if len(finite) > 1 else 1.0
        stats[name] = (mean, std if std > 0 else 1.0)
    return stats


class Design:
    """Blocks of a numeric design matrix, one per working column.

    Parameters
    ----------
    X : DataFrame
        Working frame; missing cells give NaN rows in the blocks (all-NaN for one-hot blocks).
    mode : {"onehot", "codes"}
        How label columns are encoded.
    stats : dict
        Means and standard deviations for numeric columns (standardisation), or ``None`` to
        keep raw values.
    """

    def __init__(self, X: pd.DataFrame, mode: str, stats: dict[str, tuple[float, float]] | None):
        self.mode = mode
        self.stats = stats
        self.names = list(X.columns)
        self.blocks = {name: self.block(X[name]) for name in self.names}

    def block(self, column: pd.Series) -> np.ndarray:
        """Design block of one column."""
        if is_categorical(column):
            codes = column.cat.codes.to_numpy()
            if self.mode == "codes":
                return np.where(codes >= 0, codes, np.nan).astype(float)[:, None]
            block = np.zeros((len(codes), len(column.cat.categories)))
            ok = codes >= 0
            block[np.flatnonzero(ok), codes[ok]] = 1.0
            block[~ok] = np.nan
            return block
        values = column.to_numpy(float, na_value=np.nan).copy()
        if self.stats is not None:
            mean, std = self.stats[column.name]
            values = (values - mean) / std
        return values[:, None]

    def update(self, column: pd.Series) -> None:
        """Replace one column's block."""
        self.blocks[column.name] = self.block(column)

    def matrix(self, exclude: Collection[str] = (), rows: np.ndarray | None = None) -> np.ndarray:
        """The design matrix of every column but those in ``exclude``, optionally for some rows."""
        parts = [self.blocks[n] for n in self.names if n not in exclude]
        if rows is not None:
            parts = [p[rows] for p in parts]
        if not parts:
            n = len(next(iter(self.blocks.values()))) if rows is None else int(np.sum(rows))
            return np.zeros((n, 1))
        return np.hstack(parts)

    def slices(self) -> dict[str, slice]:
        """Where each column's block sits in :meth:`matrix` (with nothing excluded)."""
        out, start = {}, 0
        for name in self.names:
            width = self.blocks[name].shape[1]
            out[name] = slice(start, start + width)
            start += width
        return out
