"""Numeric metrics and the distribution checks (see :mod:`imputelab.metrics.scores`)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from imputelab.errors import DataError
from imputelab.metrics._common import _mae, _numeric_pair, _rmse, _scaled, _w1, shared_doc

__all__ = ["correlation_shift", "mae", "nrmse", "rmse", "variance_ratio", "wasserstein"]


@shared_doc
def rmse(true: Any, filled: Any) -> float:
    """Root mean squared error between hidden and filled values.

{pair_numeric}

{returns_float}
        ``sqrt(mean((filled - true) ** 2))``; nan when ``n == 0``.

{raises_numeric}

    Examples
    --------
    >>> rmse([1.0, 2.0, 3.0], [1.0, 2.0, 5.0])
    1.1547005383792515
    """
    return _rmse(*_numeric_pair(true, filled))


@shared_doc
def mae(true: Any, filled: Any) -> float:
    """Mean absolute error between hidden and filled values.

{pair_numeric}

{returns_float}
        ``mean(abs(filled - true))``; nan when ``n == 0``.

{raises_numeric}

    Examples
    --------
    >>> mae([1.0, 2.0, 3.0], [1.0, 2.0, 6.0])
    1.0
    """
    return _mae(*_numeric_pair(true, filled))


@shared_doc
def nrmse(true: Any, filled: Any, scale: float | None) -> float:
    """RMSE divided by the standard deviation of the column's observed values.

    Filling every hidden cell with the observed mean scores about 1 when cells are missing
    completely at random, so values below 1 mean "better than the mean".

{pair_scaled}

{returns_float}
        ``rmse(true, filled) / scale``; nan when ``n == 0`` or when ``scale`` is None,
        zero or not finite.

{raises_scaled}

    Examples
    --------
    >>> nrmse([1.0, 2.0, 3.0], [2.0, 2.0, 2.0], scale=0.5)
    1.632993161855452
    >>> nrmse([1.0, 2.0], [1.0, 2.0], scale=0.0)
    nan
    """
    return _scaled(_rmse(*_numeric_pair(true, filled)), scale)


@shared_doc
def wasserstein(true: Any, filled: Any, scale: float | None) -> float:
    """Wasserstein-1 distance between hidden and filled values, over the column's std.

    Unlike RMSE this compares the two distributions and ignores which value went in which
    cell, so it rewards methods that keep the column's spread (a mean fill scores badly).

{pair_scaled}

{returns_float}
        ``scipy.stats.wasserstein_distance(true, filled) / scale``; nan when ``n == 0`` or
        when ``scale`` is None, zero or not finite.

{raises_scaled}

    Examples
    --------
    >>> wasserstein([1.0, 2.0, 3.0], [3.0, 1.0, 2.0], scale=1.0)
    0.0
    >>> wasserstein([0.0, 1.0], [1.0, 2.0], scale=2.0)
    0.5
    """
    return _scaled(_w1(*_numeric_pair(true, filled)), scale)


# ------------------------------------------------------------------- distribution checks


@shared_doc
def variance_ratio(true: Any, filled: Any) -> float:
    """Variance of the filled values over the variance of the hidden true values.

    1 means the fills are as spread out as the values they replace; mean imputation gives
    0, the flattening that accuracy scores reward. Both variances use ``ddof=0``.

    Parameters
    ----------
    true, filled : array-like, shape (n,)
        Hidden values and the values put in their place.

{returns_float}
        The ratio; nan when ``n < 2`` or the true values have no spread.

    Examples
    --------
    >>> variance_ratio([0.0, 2.0, 4.0], [1.0, 2.0, 3.0])
    0.25
    """
    t, f = _numeric_pair(true, filled)
    if t.size < 2:
        return math.nan
    spread = float(np.var(t))
    if not spread > 0:
        return math.nan
    return float(np.var(f)) / spread


def _pearson(a: np.ndarray, b: np.ndarray) -> float:
    a = a - a.mean()
    b = b - b.mean()
    denom = math.sqrt(float(a @ a) * float(b @ b))
    return float(a @ b) / denom if denom > 0 else math.nan


def correlation_shift(
    true: Any, filled: Any, others_true: np.ndarray, others_filled: np.ndarray
) -> float:
    """Mean absolute change of a column's correlations with the other columns after filling.

    For each other column ``j``, the Pearson correlation of the column with column ``j`` is
    computed twice over the same rows (those where both *true* values are known): once on
    the true values, once on the filled ones; the result is the mean of ``|r_filled -
    r_true|`` over the other columns. Filling with a constant pulls correlations towards 0;
    a good model keeps them.

    Parameters
    ----------
    true, filled : array-like, shape (n,)
        The whole column before masking (nan where it was really missing) and after filling.
    others_true, others_filled : ndarray of shape (n, q)
        The other numeric columns, before masking and after filling.

{returns_float}
        Mean absolute shift, in [0, 2]; nan when there is no other column with at least 3
        shared rows and spread in both.

    Examples
    --------
    >>> t = np.array([1.0, 2.0, 3.0, 4.0]); o = t[:, None] * 2
    >>> correlation_shift(t, np.array([1.0, 2.5, 2.5, 4.0]), o, o)
    0.0513...
    """
    t, f = _numeric_pair(true, filled)
    ot, of = (np.asarray(a, dtype=float) for a in (others_true, others_filled))
    ot, of = (a[:, None] if a.ndim == 1 else a for a in (ot, of))
    if ot.ndim != 2 or ot.shape != of.shape or ot.shape[0] != len(t):
        raise DataError(f"the other columns must be arrays of shape ({len(t)}, q), the same "
                        f"before and after filling; got {ot.shape} and {of.shape}")
    shifts = []
    for j in range(ot.shape[1]):
        rows = np.isfinite(t) & np.isfinite(ot[:, j]) & np.isfinite(f) & np.isfinite(of[:, j])
        if rows.sum() < 3:
            continue
        before = _pearson(t[rows], ot[rows, j])
        after = _pearson(f[rows], of[rows, j])
        if math.isfinite(before) and math.isfinite(after):
            shifts.append(abs(after - before))
    return float(np.mean(shifts)) if shifts else math.nan
