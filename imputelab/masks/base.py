"""The mask contract and the shared pieces every mask uses.

A mask chooses which *observed* cells of a working frame to hide so that an imputation
method can be scored against the values it did not see. Every mask hides the same number
of cells per column (see :func:`hidden_count`); masks differ only in *which* cells.

Masks whose hiding probability depends on the data (MAR, MNAR) describe each observed
cell by a logit score ``t_i`` and hide with probability ``p_i = sigmoid(a + t_i)``, where
the intercept ``a`` is solved for so that the mean of ``p`` over the observed cells equals
the requested rate (:func:`calibrate_intercept`). Exactly ``k`` cells are then drawn by
weighted sampling without replacement with weights ``p`` (:func:`weighted_choice`).
"""

from __future__ import annotations

import abc
import inspect
import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
import pandas as pd
from scipy.optimize import brentq
from scipy.special import logit

from imputelab.checks import check_share
from imputelab.errors import DataError, OptionError

__all__ = [
    "MIN_OBSERVED",
    "ColumnDraw",
    "Mask",
    "calibrate_intercept",
    "check_strength",
    "hidden_count",
    "pick_by_score",
    "standardized_effect",
    "weighted_choice",
]

#: A column with fewer observed cells than this gets no hidden cells: scoring on one or
#: two hidden values says nothing, and the method needs something left to learn from.
MIN_OBSERVED = 4


def hidden_count(n_observed: int, rate: float) -> int:
    """Number of cells a mask hides in a column with ``n_observed`` observed cells.

    ``k = round(rate * n_observed)`` (Python's ``round``, halves go to the even integer),
    capped so that at least ``max(2, ceil(0.1 * n_observed))`` cells stay observed.
    A column with fewer than :data:`MIN_OBSERVED` (4) observed cells gets ``k = 0``.

    Parameters
    ----------
    n_observed : int
        Observed (non-missing) cells in the column.
    rate : float
        Fraction of the observed cells to hide, in (0, 1).

    Returns
    -------
    int
        The number of cells to hide, ``0 <= k <= n_observed - 2``.
    """
    if n_observed < MIN_OBSERVED:
        return 0
    keep = max(2, math.ceil(0.1 * n_observed))
    return max(0, min(round(rate * n_observed), n_observed - keep))


def calibrate_intercept(score: np.ndarray, rate: float) -> float:
    """Intercept ``a`` with ``mean(sigmoid(a + score)) == rate``.

    The mean is increasing in ``a``; with ``m = max|score|`` the value at
    ``logit(rate) - m`` is at most ``rate`` and at ``logit(rate) + m`` at least ``rate``,
    so that interval (widened by 1) always brackets the root for Brent's method.

    Parameters
    ----------
    score : ndarray of shape (n,)
        Finite logit scores of the observed cells.
    rate : float
        Target mean probability, in (0, 1).

    Returns
    -------
    float
        The intercept.
    """
    score = np.asarray(score, dtype=float)
    centre = float(logit(rate))
    spread = float(np.max(np.abs(score))) if score.size else 0.0
    if spread == 0.0:
        return centre

    # sigmoid(x) = (1 + tanh(x / 2)) / 2: cannot overflow, and numpy's tanh is about twice
    # as fast as scipy's expit, which matters inside the root search.
    half = 0.5 * score

    def gap(a: float) -> float:
        return 0.5 + 0.5 * float(np.tanh(half + 0.5 * a).mean()) - rate

    # Exactly k cells are drawn afterwards, so the intercept only shapes the weights; a
    # tolerance of 1e-6 on it is far below anything that changes the draw.
    return float(brentq(gap, centre - spread - 1.0, centre + spread + 1.0, xtol=1e-6))


def weighted_choice(log_weights: np.ndarray, k: int, rng: np.random.Generator) -> np.ndarray:
    """Draw ``k`` distinct indices with probability proportional to the weights.

    Efraimidis & Spirakis (2006), "Weighted random sampling with a reservoir",
    Information Processing Letters 97(5): give item ``i`` the key ``u_i ** (1 / w_i)``
    with ``u_i`` uniform on (0, 1) and keep the ``k`` largest keys. The ordering is
    computed in logs, as the ``k`` smallest ``log(-log u_i) - log w_i``, which is the same
    ordering but cannot underflow when weights are tiny.

    Parameters
    ----------
    log_weights : ndarray of shape (n,)
        Natural log of positive weights (``-inf`` for weight 0 is allowed).
    k : int
        How many indices to draw, ``0 <= k <= n``.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    ndarray of int, shape (k,)
        The chosen indices into ``log_weights``, in no particular order.
    """
    log_weights = np.asarray(log_weights, dtype=float)
    n = log_weights.size
    if k <= 0:
        return np.empty(0, dtype=np.intp)
    if k >= n:
        return np.arange(n, dtype=np.intp)
    # -log(u) for u uniform is a standard exponential draw.
    with np.errstate(divide="ignore"):
        keys = np.log(rng.standard_exponential(n)) - log_weights
    return np.argpartition(keys, k - 1)[:k]


def standardized_effect(series: pd.Series, rng: np.random.Generator) -> np.ndarray:
    """A standardized numeric stand-in for a column: 0 where the column is missing.

    Numeric columns are z-scored with the mean and standard deviation (``ddof=0``) of
    their finite observed values. Other columns (categorical, text, ...) give each
    category a random ``N(0, 1)`` effect, and the per-row effects are z-scored over the
    observed rows. Missing or non-finite cells, and columns with no spread, give 0.

    Parameters
    ----------
    series : pandas.Series
        One column of the working frame.
    rng : numpy.random.Generator
        Used only for the category effects; a numeric column draws nothing.

    Returns
    -------
    ndarray of float, shape (len(series),)
    """
    if pd.api.types.is_numeric_dtype(series.dtype) and not isinstance(
        series.dtype, pd.CategoricalDtype
    ):
        values = series.to_numpy(dtype=float, na_value=np.nan)
    else:
        codes, uniques = pd.factorize(series, use_na_sentinel=True)
        effects = rng.standard_normal(len(uniques))
        if len(uniques):
            values = np.where(codes >= 0, effects[np.maximum(codes, 0)], np.nan)
        else:  # every cell missing: no label to give an effect
            values = np.full(len(series), np.nan)
    finite = np.isfinite(values)
    z = np.zeros(values.shape, dtype=float)
    if finite.sum() < 2:
        return z
    mean = values[finite].mean()
    std = values[finite].std()
    if not std > 0:
        return z
    z[finite] = (values[finite] - mean) / std
    return z


@dataclass(frozen=True, eq=False)
class ColumnDraw:
    """What :meth:`Mask._pick` gets for one column: where to choose, how many, and how.

    Attributes
    ----------
    observed : ndarray of int
        Row positions of the column's observed cells.
    k : int
        How many of them to hide (:func:`hidden_count`).
    rate : float
        The requested rate.
    rng : numpy.random.Generator
        Source of randomness.
    """

    observed: np.ndarray
    k: int
    rate: float
    rng: np.random.Generator


class Mask(abc.ABC):
    """Chooses which observed cells of a working frame to hide.

    Subclasses store their parameters in ``__init__`` and implement :meth:`_pick` (or
    :meth:`_hide`, for whole rows at once); :meth:`sample` validates the request, counts the
    cells to hide and assembles the result. ``sample`` never changes the instance.
    """

    name: ClassVar[str]

    def sample(
        self,
        X: pd.DataFrame,
        columns: Sequence[str],
        rate: float,
        rng: np.random.Generator,
        info: dict[str, list[str]] | None = None,
    ) -> np.ndarray:
        """Choose the cells to hide.

        Parameters
        ----------
        X : pandas.DataFrame
            The working frame: float64 numeric columns and categorical columns, NaN for
            missing. It is not modified.
        columns : sequence of str
            Columns of ``X`` to hide cells in; the result's columns follow this order.
        rate : float
            Fraction of each column's observed cells to hide, in (0, 1). The count per
            column is :func:`hidden_count` ``(n_observed, rate)``.
        rng : numpy.random.Generator
            Source of randomness; the same frame, columns, rate and generator state give
            the same mask.
        info : dict or None, default None
            If given, filled with ``{column: [columns that drove the mask]}`` for every
            column in ``columns``: the drivers for MAR, the column itself for MNAR,
            ``[]`` when the choice did not depend on data (MCAR, or nothing hidden).

        Returns
        -------
        ndarray of bool, shape (len(X), len(columns))
            True where a cell is to be hidden; only observed cells are ever True.

        Raises
        ------
        OptionError
            If ``rate`` is not a number strictly between 0 and 1, or a mask parameter is
            out of range.
        DataError
            If a column is not in ``X`` or is not uniquely named there.
        """
        cols = _check_request(X, columns, rate, rng)
        self._check_params()
        return self._hide(X, cols, float(rate), rng, info)

    def _hide(self, X: pd.DataFrame, cols: list[str], rate: float, rng: np.random.Generator,
              info: dict[str, list[str]] | None) -> np.ndarray:
        """The mask of :meth:`sample` once the request is checked: one column at a time.

        A mask that hides whole rows at once (``pattern``) overrides this instead of
        :meth:`_pick`.
        """
        hidden = np.zeros((len(X), len(cols)), dtype=bool)
        for j, col in enumerate(cols):
            observed = np.flatnonzero(X[col].notna().to_numpy())
            k = hidden_count(observed.size, rate)
            drivers: list[str] = []
            if k > 0:
                rows, drivers = self._pick(X, col, ColumnDraw(observed, k, rate, rng))
                hidden[rows, j] = True
            if info is not None:
                info[col] = drivers
        return hidden

    def _pick(self, X: pd.DataFrame, column: str, draw: ColumnDraw) -> tuple[np.ndarray, list[str]]:
        """Choose ``draw.k`` rows among ``draw.observed`` to hide in ``column``.

        Returns the chosen row positions (a subset of ``draw.observed``) and the names of
        the columns whose values drove the choice.
        """
        raise NotImplementedError(f"{type(self).__name__} must implement _pick or _hide")

    def _check_params(self) -> None:
        """Raise OptionError if a stored parameter is out of range (none by default)."""
        return None

    def get_params(self) -> dict[str, Any]:
        """The constructor parameters and their current values."""
        names = [
            p.name
            for p in inspect.signature(type(self).__init__).parameters.values()
            if p.name != "self" and p.kind is not inspect.Parameter.VAR_KEYWORD
        ]
        return {n: getattr(self, n) for n in names}

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.get_params().items())
        return f"{type(self).__name__}({args})"


def pick_by_score(score: np.ndarray, draw: ColumnDraw) -> np.ndarray:
    """Calibrate ``sigmoid(a + score)`` to ``draw.rate`` and draw ``draw.k`` rows by it.

    ``score`` holds one finite logit score per entry of ``draw.observed``.
    """
    x = calibrate_intercept(score, draw.rate) + score
    # log(sigmoid(x)) = -softplus(-x), written out so it cannot overflow.
    log_p = -(np.maximum(-x, 0.0) + np.log1p(np.exp(-np.abs(x))))
    return draw.observed[weighted_choice(log_p, draw.k, draw.rng)]


def check_strength(mask: Mask, strength: float) -> None:
    """Raise OptionError unless ``strength`` is a finite real number."""
    if (
        isinstance(strength, bool)
        or not isinstance(strength, numbers.Real)
        or not math.isfinite(strength)
    ):
        raise OptionError(f"mask '{mask.name}': strength must be a finite number, got {strength!r}")


def _check_request(
    X: pd.DataFrame, columns: Sequence[str], rate: float, rng: np.random.Generator
) -> list[str]:
    if not isinstance(X, pd.DataFrame):
        raise TypeError(f"X must be a pandas DataFrame, got {type(X).__name__}")
    if isinstance(columns, str):
        raise TypeError("columns must be a sequence of column names, not a single string")
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"rng must be a numpy.random.Generator, got {type(rng).__name__}")
    check_share(rate, "rate")
    cols = list(columns)
    missing = [c for c in cols if c not in X.columns]
    if missing:
        listed = ", ".join(repr(c) for c in missing)
        raise DataError(f"no such column(s) in the table: {listed}")
    repeated = sorted({str(c) for c in cols if cols.count(c) > 1})
    if repeated:
        raise DataError(f"column(s) listed more than once: {', '.join(repeated)}")
    duplicated = [c for c in cols if np.count_nonzero(X.columns == c) > 1]
    if duplicated:
        listed = ", ".join(repr(c) for c in duplicated)
        raise DataError(f"column name(s) not unique in the table: {listed}")
    return cols
