"""Scores that compare filled cells with the hidden truth.

Every function takes the values of the *hidden* cells only: ``true`` holds what was
there before the cells were masked, ``filled`` what a method put back, aligned
position by position. Inputs may be numpy arrays, pandas Series or lists.

Numeric columns
    :func:`rmse`, :func:`mae`, :func:`nrmse` and :func:`wasserstein`. The last two are
    divided by ``scale``, the standard deviation (``ddof=0``) of the column's *observed*
    values, so that scores are comparable across columns. A ``scale`` that is zero or not
    finite gives ``nan``: a constant column has no natural unit.

Categorical columns
    :func:`accuracy`, :func:`pfc`, :func:`macro_f1` and :func:`total_variation`. Labels can
    be any hashable values (strings, integers, ...).

Empty inputs give ``nan`` for every metric, and a ``nan`` anywhere in numeric input
propagates to the result.

:data:`METRICS` describes each metric (kind, direction, whether it needs ``scale``) and
:func:`score_cells` computes all metrics of one kind at once, which is what the scoring
loop calls many times.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd

from imputelab.errors import DataError, OptionError

__all__ = [
    "METRICS",
    "PRIMARY",
    "Metric",
    "DISTRIBUTION_CHECKS",
    "accuracy",
    "correlation_shift",
    "get_metric",
    "get_metric_names",
    "mae",
    "macro_f1",
    "nrmse",
    "pfc",
    "rmse",
    "score_cells",
    "total_variation",
    "variance_ratio",
    "wasserstein",
]

Kind = Literal["numeric", "categorical"]
_KINDS: tuple[str, ...] = ("categorical", "numeric")

# numpy dtype kinds for which np.unique can sort the joined labels; anything else
# (object, str, datetime, mixed types) is encoded by hashing instead.
_SORTABLE_KINDS = frozenset("biuf")


# --------------------------------------------------------------------------- input handling


def _as_float(values: Any, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D float array (pandas missing markers become nan)."""
    try:
        if isinstance(values, pd.Series | pd.Index | pd.api.extensions.ExtensionArray):
            arr = values.to_numpy(dtype=float, na_value=np.nan)
        else:
            arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise DataError(f"numeric metric needs numbers in {name!r}: {exc}") from exc
    if arr.ndim != 1:
        raise DataError(f"{name!r} must be one-dimensional, got shape {arr.shape}")
    return arr


def _as_labels(values: Any, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D numpy array of labels."""
    arr = values.to_numpy() if isinstance(values, pd.Series | pd.Index) else np.asarray(values)
    if arr.ndim != 1:
        raise DataError(f"{name!r} must be one-dimensional, got shape {arr.shape}")
    return arr


def _check_same_length(true: np.ndarray, filled: np.ndarray) -> None:
    if true.shape[0] != filled.shape[0]:
        raise DataError(
            f"'true' and 'filled' must have the same length, got {true.shape[0]} and "
            f"{filled.shape[0]}"
        )


def _numeric_pair(true: Any, filled: Any) -> tuple[np.ndarray, np.ndarray]:
    t = _as_float(true, "true")
    f = _as_float(filled, "filled")
    _check_same_length(t, f)
    return t, f


def _encode(true: Any, filled: Any) -> tuple[np.ndarray, np.ndarray, int]:
    """Map the labels of both arrays to shared integer codes ``0..k-1``.

    Both arrays are encoded together so that the same label gets the same code in each,
    and ``k`` is the size of the union of their labels.
    """
    t = _as_labels(true, "true")
    f = _as_labels(filled, "filled")
    _check_same_length(t, f)
    n = t.shape[0]
    joined = np.concatenate([t, f])
    if t.dtype.kind in _SORTABLE_KINDS and f.dtype.kind in _SORTABLE_KINDS:
        uniques, codes = np.unique(joined, return_inverse=True)
        k = uniques.shape[0]
    else:
        # np.unique sorts, which fails on mixed types (str next to int) and is slower than
        # hashing on object arrays; missing markers are kept as one label of their own.
        codes, uniques = pd.factorize(joined.astype(object), use_na_sentinel=False)
        k = len(uniques)
    codes = np.asarray(codes, dtype=np.intp).reshape(-1)
    return codes[:n], codes[n:], k


def _valid_scale(scale: float | None) -> float | None:
    """Return ``scale`` as a float, or None when it cannot normalise (zero, nan, inf)."""
    if scale is None:
        return None
    s = float(scale)
    if math.isnan(s) or math.isinf(s) or s == 0.0:
        return None
    if s < 0.0:
        raise OptionError(f"scale must be a standard deviation (>= 0), got {s!r}")
    return s


# ------------------------------------------------------------------------- numeric kernels


def _rmse(t: np.ndarray, f: np.ndarray) -> float:
    if t.shape[0] == 0:
        return math.nan
    d = f - t
    return float(np.sqrt(np.dot(d, d) / d.shape[0]))


def _mae(t: np.ndarray, f: np.ndarray) -> float:
    if t.shape[0] == 0:
        return math.nan
    return float(np.mean(np.abs(f - t)))


def _w1(t: np.ndarray, f: np.ndarray) -> float:
    # With two equally sized unweighted samples, the optimal coupling pairs order
    # statistics, so W1 is the mean gap between the sorted samples; this equals
    # scipy.stats.wasserstein_distance without its general-weights machinery.
    if t.shape[0] == 0:
        return math.nan
    return float(np.mean(np.abs(np.sort(t) - np.sort(f))))


def _scaled(value: float, scale: float | None) -> float:
    s = _valid_scale(scale)
    return math.nan if s is None else value / s


# --------------------------------------------------------------------- categorical kernels


def _accuracy_codes(t: np.ndarray, f: np.ndarray) -> float:
    if t.shape[0] == 0:
        return math.nan
    return float(np.mean(t == f))


def _macro_f1_codes(t: np.ndarray, f: np.ndarray, k: int) -> float:
    if t.shape[0] == 0:
        return math.nan
    hits = t[t == f]
    tp = np.bincount(hits, minlength=k)
    support = np.bincount(t, minlength=k)
    predicted = np.bincount(f, minlength=k)
    # F1 = 2 TP / (2 TP + FP + FN) = 2 TP / (support + predicted). Every code is in the
    # union of labels, so the denominator is positive; a label never hit scores 0, which
    # is what zero_division=0 gives.
    return float(np.mean(2.0 * tp / (support + predicted)))


def _total_variation_codes(t: np.ndarray, f: np.ndarray, k: int) -> float:
    n = t.shape[0]
    if n == 0:
        return math.nan
    diff = np.bincount(t, minlength=k) - np.bincount(f, minlength=k)
    return float(0.5 * np.abs(diff).sum() / n)


# ------------------------------------------------------------------------ public functions


def rmse(true: Any, filled: Any) -> float:
    """Root mean squared error between hidden and filled values.

    Parameters
    ----------
    true : array-like of float, shape (n,)
        Hidden values.
    filled : array-like of float, shape (n,)
        Values put in their place.

    Returns
    -------
    float
        ``sqrt(mean((filled - true) ** 2))``; nan when ``n == 0``.

    Raises
    ------
    DataError
        If the inputs are not numeric, not 1-D, or differ in length.

    Examples
    --------
    >>> rmse([1.0, 2.0, 3.0], [1.0, 2.0, 5.0])
    1.1547005383792515
    """
    return _rmse(*_numeric_pair(true, filled))


def mae(true: Any, filled: Any) -> float:
    """Mean absolute error between hidden and filled values.

    Parameters
    ----------
    true : array-like of float, shape (n,)
        Hidden values.
    filled : array-like of float, shape (n,)
        Values put in their place.

    Returns
    -------
    float
        ``mean(abs(filled - true))``; nan when ``n == 0``.

    Raises
    ------
    DataError
        If the inputs are not numeric, not 1-D, or differ in length.

    Examples
    --------
    >>> mae([1.0, 2.0, 3.0], [1.0, 2.0, 6.0])
    1.0
    """
    return _mae(*_numeric_pair(true, filled))


def nrmse(true: Any, filled: Any, scale: float | None) -> float:
    """RMSE divided by the standard deviation of the column's observed values.

    Filling every hidden cell with the observed mean scores about 1 when cells are missing
    completely at random, so values below 1 mean "better than the mean".

    Parameters
    ----------
    true : array-like of float, shape (n,)
        Hidden values.
    filled : array-like of float, shape (n,)
        Values put in their place.
    scale : float or None
        Standard deviation (``ddof=0``) of the column's observed values.

    Returns
    -------
    float
        ``rmse(true, filled) / scale``; nan when ``n == 0`` or when ``scale`` is None,
        zero or not finite.

    Raises
    ------
    DataError
        If the inputs are not numeric, not 1-D, or differ in length.
    OptionError
        If ``scale`` is negative.

    Examples
    --------
    >>> nrmse([1.0, 2.0, 3.0], [2.0, 2.0, 2.0], scale=0.5)
    1.632993161855452
    >>> nrmse([1.0, 2.0], [1.0, 2.0], scale=0.0)
    nan
    """
    return _scaled(_rmse(*_numeric_pair(true, filled)), scale)


def wasserstein(true: Any, filled: Any, scale: float | None) -> float:
    """Wasserstein-1 distance between hidden and filled values, over the column's std.

    Unlike RMSE this compares the two distributions and ignores which value went in which
    cell, so it rewards methods that keep the column's spread (a mean fill scores badly).

    Parameters
    ----------
    true : array-like of float, shape (n,)
        Hidden values.
    filled : array-like of float, shape (n,)
        Values put in their place.
    scale : float or None
        Standard deviation (``ddof=0``) of the column's observed values.

    Returns
    -------
    float
        ``scipy.stats.wasserstein_distance(true, filled) / scale``; nan when ``n == 0`` or
        when ``scale`` is None, zero or not finite.

    Raises
    ------
    DataError
        If the inputs are not numeric, not 1-D, or differ in length.
    OptionError
        If ``scale`` is negative.

    Examples
    --------
    >>> wasserstein([1.0, 2.0, 3.0], [3.0, 1.0, 2.0], scale=1.0)
    0.0
    >>> wasserstein([0.0, 1.0], [1.0, 2.0], scale=2.0)
    0.5
    """
    return _scaled(_w1(*_numeric_pair(true, filled)), scale)


def accuracy(true: Any, filled: Any) -> float:
    """Share of hidden cells filled with the right label.

    Parameters
    ----------
    true : array-like of hashable, shape (n,)
        Hidden labels.
    filled : array-like of hashable, shape (n,)
        Labels put in their place.

    Returns
    -------
    float
        Fraction of positions where the labels are equal; nan when ``n == 0``.

    Raises
    ------
    DataError
        If the inputs are not 1-D or differ in length.

    Examples
    --------
    >>> accuracy(["a", "b", "b", "c"], ["a", "b", "c", "c"])
    0.75
    """
    t, f, _ = _encode(true, filled)
    return _accuracy_codes(t, f)


def pfc(true: Any, filled: Any) -> float:
    """Proportion of falsely classified hidden cells, ``1 - accuracy``.

    Parameters
    ----------
    true : array-like of hashable, shape (n,)
        Hidden labels.
    filled : array-like of hashable, shape (n,)
        Labels put in their place.

    Returns
    -------
    float
        Fraction of positions where the labels differ; nan when ``n == 0``.

    Raises
    ------
    DataError
        If the inputs are not 1-D or differ in length.

    Examples
    --------
    >>> pfc(["a", "b", "b", "c"], ["a", "b", "c", "c"])
    0.25
    """
    return 1.0 - accuracy(true, filled)


def macro_f1(true: Any, filled: Any) -> float:
    """F1 score averaged with equal weight over every label in ``true`` or ``filled``.

    A label that is never filled correctly scores 0, including labels that appear only in
    ``filled``; this matches ``sklearn.metrics.f1_score(average="macro", zero_division=0)``.

    Parameters
    ----------
    true : array-like of hashable, shape (n,)
        Hidden labels.
    filled : array-like of hashable, shape (n,)
        Labels put in their place.

    Returns
    -------
    float
        Macro-averaged F1 in [0, 1]; nan when ``n == 0``.

    Raises
    ------
    DataError
        If the inputs are not 1-D or differ in length.

    Examples
    --------
    >>> macro_f1(["a", "a", "b", "b"], ["a", "a", "a", "b"])
    0.7333333333333334
    """
    return _macro_f1_codes(*_encode(true, filled))


def total_variation(true: Any, filled: Any) -> float:
    """Total variation distance between the label frequencies of hidden and filled cells.

    ``0.5 * sum_k |p_true(k) - p_filled(k)|`` over the union of labels: 0 when the filled
    labels have the same frequencies as the hidden ones (in any order), 1 when the two
    share no label.

    Parameters
    ----------
    true : array-like of hashable, shape (n,)
        Hidden labels.
    filled : array-like of hashable, shape (n,)
        Labels put in their place.

    Returns
    -------
    float
        Distance in [0, 1]; nan when ``n == 0``.

    Raises
    ------
    DataError
        If the inputs are not 1-D or differ in length.

    Examples
    --------
    >>> total_variation(["a", "a", "b", "c"], ["a", "b", "b", "b"])
    0.5
    """
    return _total_variation_codes(*_encode(true, filled))


# ------------------------------------------------------------------- distribution checks


def variance_ratio(true: Any, filled: Any) -> float:
    """Variance of the filled values over the variance of the hidden true values.

    1 means the fills are as spread out as the values they replace; mean imputation gives
    0, the flattening that accuracy scores reward. Both variances use ``ddof=0``.

    Parameters
    ----------
    true, filled : array-like, shape (n,)
        Hidden values and the values put in their place.

    Returns
    -------
    float
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

    Returns
    -------
    float
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


DISTRIBUTION_CHECKS: dict[str, str] = {
    "variance_ratio": "variance of the fills / variance of the hidden values (1 is ideal)",
    "corr_shift": "mean |change| of the column's correlations with the other numeric columns",
    "distribution": "wasserstein + corr_shift for numbers; total_variation for labels "
                    "(lower is better)",
}
"""Scores reported beside the accuracy metrics; they are not primary metrics."""


# ---------------------------------------------------------------------------------- registry


@dataclass(frozen=True)
class Metric:
    """Description of one metric.

    Parameters
    ----------
    name : str
        Key in :data:`METRICS`.
    kind : {"numeric", "categorical"}
        Column kind the metric applies to.
    greater_is_better : bool
        True when a higher score means a better fill.
    func : callable
        ``func(true, filled)``, or ``func(true, filled, scale)`` when ``needs_scale``.
    needs_scale : bool
        True when ``func`` takes the observed standard deviation as third argument.

    Examples
    --------
    >>> m = get_metric("nrmse")
    >>> m.kind, m.greater_is_better, m.needs_scale
    ('numeric', False, True)
    >>> m.compute([1.0, 3.0], [2.0, 2.0], scale=2.0)
    0.5
    """

    name: str
    kind: Kind
    greater_is_better: bool
    func: Callable[..., float]
    needs_scale: bool

    def compute(self, true: Any, filled: Any, scale: float | None = None) -> float:
        """Score ``filled`` against ``true``, passing ``scale`` only if the metric uses it.

        Parameters
        ----------
        true, filled : array-like, shape (n,)
            Hidden values and the values put in their place.
        scale : float or None, default=None
            Standard deviation of the column's observed values (ignored by metrics that
            do not need it).

        Returns
        -------
        float
            The metric's value.
        """
        if self.needs_scale:
            return self.func(true, filled, scale)
        return self.func(true, filled)


METRICS: dict[str, Metric] = {
    m.name: m
    for m in (
        Metric("rmse", "numeric", False, rmse, False),
        Metric("mae", "numeric", False, mae, False),
        Metric("nrmse", "numeric", False, nrmse, True),
        Metric("wasserstein", "numeric", False, wasserstein, True),
        Metric("accuracy", "categorical", True, accuracy, False),
        Metric("pfc", "categorical", False, pfc, False),
        Metric("macro_f1", "categorical", True, macro_f1, False),
        Metric("total_variation", "categorical", False, total_variation, False),
    )
}
"""All metrics by name."""

PRIMARY: dict[str, str] = {"numeric": "nrmse", "categorical": "pfc"}
"""Metric used to rank methods for each column kind."""


def _check_kind(kind: str) -> None:
    if kind not in _KINDS:
        raise OptionError(f"unknown metric kind {kind!r}; choose one of: {', '.join(_KINDS)}")


def get_metric(name: str) -> Metric:
    """Look up a metric by name.

    Parameters
    ----------
    name : str
        One of the keys of :data:`METRICS`.

    Returns
    -------
    Metric
        The metric's description.

    Raises
    ------
    OptionError
        If no metric has that name.

    Examples
    --------
    >>> get_metric("pfc").greater_is_better
    False
    """
    try:
        return METRICS[name]
    except (KeyError, TypeError):
        raise OptionError(
            f"unknown metric {name!r}; choose one of: {', '.join(sorted(METRICS))}"
        ) from None


def get_metric_names(kind: str | None = None) -> list[str]:
    """Names of the metrics, sorted, optionally only those of one column kind.

    Parameters
    ----------
    kind : {"numeric", "categorical"} or None, default=None
        Column kind to keep; None keeps all.

    Returns
    -------
    list of str
        Sorted metric names.

    Raises
    ------
    OptionError
        If ``kind`` is not a known column kind.

    Examples
    --------
    >>> get_metric_names("numeric")
    ['mae', 'nrmse', 'rmse', 'wasserstein']
    """
    if kind is not None:
        _check_kind(kind)
    return sorted(name for name, m in METRICS.items() if kind is None or m.kind == kind)


def score_cells(kind: str, true: Any, filled: Any, scale: float | None = None) -> dict[str, float]:
    """Every metric of one column kind for a set of hidden cells.

    The inputs are converted and, for labels, encoded once, so this is much cheaper than
    calling each metric function in turn.

    Parameters
    ----------
    kind : {"numeric", "categorical"}
        Column kind; picks the metrics.
    true : array-like, shape (n,)
        Hidden values or labels.
    filled : array-like, shape (n,)
        Values or labels put in their place.
    scale : float or None, default=None
        Standard deviation (``ddof=0``) of the column's observed values, used by ``nrmse``
        and ``wasserstein``; when None, zero or not finite those two are nan. Ignored for
        categorical columns.

    Returns
    -------
    dict of str to float
        ``{"rmse", "mae", "nrmse", "wasserstein"}`` for numeric columns,
        ``{"accuracy", "pfc", "macro_f1", "total_variation"}`` for categorical ones. All
        values are nan when ``n == 0``.

    Raises
    ------
    OptionError
        If ``kind`` is unknown, or ``scale`` is negative.
    DataError
        If the inputs are not 1-D, differ in length, or are not numeric for a numeric
        column.

    Examples
    --------
    >>> score_cells("numeric", [0.0, 2.0], [1.0, 1.0], scale=1.0)
    {'rmse': 1.0, 'mae': 1.0, 'nrmse': 1.0, 'wasserstein': 1.0}
    >>> score_cells("categorical", ["x", "y"], ["x", "x"])
    {'accuracy': 0.5, 'pfc': 0.5, 'macro_f1': 0.3333333333333333, 'total_variation': 0.5}
    """
    _check_kind(kind)
    if kind == "numeric":
        t, f = _numeric_pair(true, filled)
        s = _valid_scale(scale)
        r = _rmse(t, f)
        w = _w1(t, f)
        return {
            "rmse": r,
            "mae": _mae(t, f),
            "nrmse": math.nan if s is None else r / s,
            "wasserstein": math.nan if s is None else w / s,
        }
    t, f, k = _encode(true, filled)
    acc = _accuracy_codes(t, f)
    return {
        "accuracy": acc,
        "pfc": 1.0 - acc,
        "macro_f1": _macro_f1_codes(t, f, k),
        "total_variation": _total_variation_codes(t, f, k),
    }
