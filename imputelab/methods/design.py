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

from imputelab.frame.encoding import is_categorical

__all__ = ["MAX_ONEHOT", "Design", "column_stats", "frequent_levels"]

MAX_ONEHOT = 30  # labels beyond the most frequent 30 share one all-zero "other" row


def frequent_levels(X: pd.DataFrame, limit: int = MAX_ONEHOT) -> dict[str, np.ndarray]:
    """Codes of the ``limit`` most frequent labels of each label column with more labels."""
    keep = {}
    for name in X.columns:
        column = X[name]
        if is_categorical(column) and len(column.cat.categories) > limit:
            codes = column.cat.codes.to_numpy()
            counts = np.bincount(codes[codes >= 0], minlength=len(column.cat.categories))
            keep[name] = np.sort(np.argsort(-counts, kind="stable")[:limit])
    return keep


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
    keep : dict, optional
        For label columns with many labels, the codes that get a one-hot column (see
        :func:`frequent_levels`).
    """

    def __init__(self, X: pd.DataFrame, mode: str, stats: dict[str, tuple[float, float]] | None,
                 keep: dict[str, np.ndarray] | None = None):
        self.mode = mode
        self.stats = stats
        self.keep = keep or {}
        self.names = list(X.columns)
        self.blocks = {name: self.block(X[name]) for name in self.names}

    def block(self, column: pd.Series) -> np.ndarray:
        """Design block of one column."""
        if is_categorical(column):
            codes = column.cat.codes.to_numpy()
            if self.mode == "codes":
                return np.where(codes >= 0, codes, np.nan).astype(float)[:, None]
            ok = codes >= 0
            if column.name in self.keep:  # many labels: one-hot the frequent ones only
                position = np.full(len(column.cat.categories), -1)
                kept = self.keep[column.name]
                position[kept] = np.arange(len(kept))
                block = np.zeros((len(codes), len(kept)))
                where = np.where(ok, position[np.maximum(codes, 0)], -1)
                hit = where >= 0
                block[np.flatnonzero(hit), where[hit]] = 1.0
            else:
                block = np.zeros((len(codes), len(column.cat.categories)))
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
