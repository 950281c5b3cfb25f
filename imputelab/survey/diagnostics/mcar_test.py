"""Little's test of missing completely at random (MCAR), on EM estimates.

Little, R. J. A. (1988), "A test of missing completely at random for multivariate data with
missing values", *Journal of the American Statistical Association* 83(404): 1198-1202.

Rows are grouped by their *missing pattern* (which columns are observed). Under MCAR every
pattern is a random sample of the rows, so the mean of each pattern's observed columns should
be close to the overall mean. With ``μ̂`` and ``Σ̂`` the maximum-likelihood estimates of a
multivariate normal (found by EM, :func:`em_mvn`) the statistic is::

    d² = Σ_j n_j (ȳ_obs,j − μ̂_obs,j)ᵀ Σ̂_obs,j⁻¹ (ȳ_obs,j − μ̂_obs,j)

where pattern ``j`` has ``n_j`` rows and observes ``p_j`` of the ``p`` columns, ``ȳ_obs,j`` is
the mean of those columns over its rows and ``μ̂_obs,j``, ``Σ̂_obs,j`` are the matching parts of
``μ̂``, ``Σ̂``. Under MCAR ``d²`` is asymptotically chi-square with ``Σ_j p_j − p`` degrees of
freedom (:func:`little_mcar_test`).

Both functions work internally on columns centred and scaled by their observed mean and
standard deviation (``ddof=0``). The statistic does not change under such a rescaling, and it
keeps the EM convergence test and the pseudo-inverse cut-off below independent of the units.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import scipy.stats

from imputelab.errors import DataError
from imputelab.survey.diagnostics.em import (
    EMResult,
    _as_matrix,
    _check_options,
    _observed_inverse,
    _reduce,
    _Reduced,
    _run_em,
    em_mvn,
)

__all__ = ["EMResult", "LittleTest", "em_mvn", "little_mcar_test"]


@dataclass(frozen=True)
class LittleTest:
    """Outcome of :func:`little_mcar_test`.

    Attributes
    ----------
    statistic : float or None
        Little's ``d²``; ``None`` when not testable.
    df : int
        Degrees of freedom ``Σ_j p_j − p`` (0 when not testable for lack of patterns or
        columns).
    p_value : float or None
        ``P(χ²_df > d²)``; ``None`` when not testable.
    patterns : int
        Distinct missing patterns among the rows used.
    rows : int
        Rows used (rows with no observed value in the columns used are dropped).
    columns : list of str
        Columns used, in input order.
    dropped_columns : list of str
        Columns left out because they have no observed value or a single observed value
        repeated (zero variance).
    testable : bool
        Whether the test could be run.
    note : str
        How to read the result, or why there is none.
    """

    statistic: float | None
    df: int
    p_value: float | None
    patterns: int
    rows: int
    columns: list[str]
    dropped_columns: list[str]
    testable: bool
    note: str

    def to_dict(self) -> dict[str, Any]:
        """The result as plain JSON-ready values (``None`` where not testable)."""
        return {
            "statistic": None if self.statistic is None else float(self.statistic),
            "df": int(self.df),
            "p_value": None if self.p_value is None else float(self.p_value),
            "patterns": int(self.patterns),
            "rows": int(self.rows),
            "columns": list(self.columns),
            "testable": bool(self.testable),
            "note": self.note,
        }


def _frame_to_matrix(
    frame: pd.DataFrame, columns: Sequence[Any] | None
) -> tuple[np.ndarray, list[str]]:
    if columns is not None:
        labels = list(columns)
        unknown = [c for c in labels if c not in frame.columns]
        if unknown:
            raise DataError(f"unknown column(s): {', '.join(map(repr, unknown))}")
        frame = frame.loc[:, labels]
    bad = [
        str(name)
        for name, dtype in frame.dtypes.items()
        if not pd.api.types.is_numeric_dtype(dtype)
        or pd.api.types.is_bool_dtype(dtype)
        or pd.api.types.is_complex_dtype(dtype)
    ]
    if bad:
        raise DataError(
            f"Little's test needs numeric columns; not numeric: {', '.join(map(repr, bad))}"
        )
    values = frame.to_numpy(dtype=float, na_value=np.nan, copy=True)
    if np.isinf(values).any():
        raise DataError("data contains infinite values; only NaN may mark a missing value")
    return values, [str(c) for c in frame.columns]


_READING = (
    "A small p-value is evidence against MCAR; a large one is no proof of MCAR, because the "
    "test has little power against some departures and none against MNAR that leaves the "
    "means unchanged."
)


def little_mcar_test(
    X: np.ndarray | pd.DataFrame,
    *,
    columns: Sequence[Any] | None = None,
    max_iter: int = 500,
    tol: float = 1e-8,
) -> LittleTest:
    """Little's (1988) chi-square test of missing completely at random.

    Little, R. J. A. (1988), *JASA* 83(404): 1198-1202. With ``μ̂``, ``Σ̂`` the EM
    maximum-likelihood estimates under a multivariate normal (:func:`em_mvn`), ::

        d² = Σ_j n_j (ȳ_obs,j − μ̂_obs,j)ᵀ Σ̂_obs,j⁻¹ (ȳ_obs,j − μ̂_obs,j),
        df = Σ_j p_j − p,      p-value = P(χ²_df > d²),

    summing over the missing patterns ``j`` (``n_j`` rows, ``p_j`` observed columns,
    ``ȳ_obs,j`` their means over those rows). A large ``d²`` means the patterns differ in
    their means more than random samples would. The chi-square law is asymptotic; the test
    assumes roughly normal data and a common covariance in every pattern.

    Columns with no observed value or no spread (one value repeated) are dropped and listed
    in ``dropped_columns``; then rows with no observed value in the columns left. The result
    is not testable (``statistic`` and ``p_value`` ``None``) with fewer than two columns, with
    no more rows than columns, with a single missing pattern, or when ``df`` is 0.

    Parameters
    ----------
    X : ndarray of shape (n, p) or DataFrame
        Numeric data, ``NaN`` (or a pandas missing marker) for missing.
    columns : sequence, optional
        For a DataFrame, the columns to test (default all). For an array, names for its
        columns (default ``"0"``, ``"1"``, ...), as in ``pandas.DataFrame(X, columns=...)``.
    max_iter : int, default 500
        Most EM iterations (see :func:`em_mvn`).
    tol : float, default 1e-8
        EM convergence tolerance (see :func:`em_mvn`).

    Returns
    -------
    LittleTest
        Statistic, degrees of freedom, p-value, counts, columns used and dropped, and a
        note on how to read it; ``to_dict()`` gives JSON-ready values.

    Raises
    ------
    DataError
        If ``X`` is not two-dimensional, holds a non-numeric column or an infinity, or
        ``columns`` does not match it.
    OptionError
        If ``max_iter`` or ``tol`` is not positive.
    """
    _check_options(max_iter, tol)
    x, names = _input_matrix(X, columns)
    observed = ~np.isnan(x)
    lo = np.where(observed, x, np.inf).min(axis=0, initial=np.inf)
    hi = np.where(observed, x, -np.inf).max(axis=0, initial=-np.inf)
    keep = hi > lo  # at least two distinct observed values
    dropped = [nm for nm, k in zip(names, keep, strict=True) if not k]
    used = [nm for nm, k in zip(names, keep, strict=True) if k]
    x = x[:, keep]
    x = x[~np.isnan(x).all(axis=1)]
    n, p = x.shape
    data = _reduce(x) if p >= 2 and n > p else None
    why = _untestable(n, p, data)
    if why:
        # Every untestable case has df 0: a single pattern is the complete one.
        patterns = 0 if data is None else data.n_patterns
        return LittleTest(None, 0, None, patterns, n, used, dropped, False, why)
    assert data is not None
    df = int(data.observed.sum()) - p
    statistic, note = _statistic(data, max_iter, tol)
    p_value = float(scipy.stats.chi2.sf(statistic, df))
    return LittleTest(statistic, df, p_value, data.n_patterns, n, used, dropped, True, note)


def _untestable(n: int, p: int, data: _Reduced | None) -> str:
    """Why the test cannot run on ``n`` rows of ``p`` usable columns, or ``""``."""
    if p < 2:
        return (f"Not testable: {p} usable column(s), but the test compares at least two "
                "(a usable column has two or more distinct observed values).")
    if n <= p or data is None:
        return (f"Not testable: {n} rows with an observed value, but estimating a {p}-column "
                f"covariance needs at least {p + 1}.")
    if data.n_patterns == 1:
        # A single pattern is always the complete one: a column missing in every row has
        # been dropped before.
        return ("Not testable: no value is missing in the columns used, so there are no "
                "groups of rows to compare.")
    if int(data.observed.sum()) == p:
        return ("Not testable: the missing patterns share no observed column, so there are "
                "zero degrees of freedom.")
    return ""


def _input_matrix(X: np.ndarray | pd.DataFrame,
                  columns: Sequence[Any] | None) -> tuple[np.ndarray, list[str]]:
    """The data as a new float array and its column names."""
    if isinstance(X, pd.DataFrame):
        return _frame_to_matrix(X, columns)
    x = _as_matrix(X)
    if columns is None:
        return x, [str(i) for i in range(x.shape[1])]
    names = [str(c) for c in columns]
    if len(names) != x.shape[1]:
        raise DataError(f"got {len(names)} column names for an array of {x.shape[1]} columns")
    return x, names


def _statistic(data: _Reduced, max_iter: int, tol: float) -> tuple[float, str]:
    """Little's d² on EM estimates, and the note on how to read it."""
    mean, cov, n_iter, converged = _run_em(data, max_iter, tol)
    o = data.observed
    # Pattern mean minus EM mean, 0 in the missing columns, where inv_oo is 0 as well.
    delta = data.sums / data.n[:, None] - o * mean
    inv_oo = _observed_inverse(cov, o[:, :, None] * o[:, None, :])
    statistic = float(data.n @ np.einsum("gi,gij,gj->g", delta, inv_oo, delta))
    note = _READING
    if not converged:
        note += (
            f" EM stopped after {n_iter} iterations without converging, so the statistic is "
            "approximate."
        )
    return statistic, note
