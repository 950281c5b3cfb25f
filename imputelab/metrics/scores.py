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

from imputelab.errors import OptionError
from imputelab.metrics._common import (
    _accuracy_codes,
    _encode,
    _macro_f1_codes,
    _mae,
    _numeric_pair,
    _rmse,
    _total_variation_codes,
    _valid_scale,
    _w1,
)
from imputelab.metrics.labels import accuracy, macro_f1, pfc, total_variation
from imputelab.metrics.numeric import (
    correlation_shift,
    mae,
    nrmse,
    rmse,
    variance_ratio,
    wasserstein,
)

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
