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

from imputelab.errors import DataError, OptionError

__all__ = ["EMResult", "LittleTest", "em_mvn", "little_mcar_test"]

#: Relative cut-off of the pseudo-inverse used for every covariance block (on the
#: standardised scale, where variances are about 1): eigenvalues below this fraction of the
#: largest are treated as zero, so a constant or exactly collinear column cannot make the
#: algorithm divide by (almost) zero.
PINV_RTOL = 1e-10


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, eq=False)
class EMResult:
    """Maximum-likelihood estimates of a multivariate normal found by :func:`em_mvn`.

    Attributes
    ----------
    mean : ndarray of shape (p,)
        Estimated mean (read-only).
    cov : ndarray of shape (p, p)
        Estimated covariance, divisor ``n`` (read-only).
    n_iter : int
        EM iterations run.
    converged : bool
        Whether the last iteration changed no estimate by more than ``tol``.
    """

    mean: np.ndarray
    cov: np.ndarray
    n_iter: int
    converged: bool


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


# --------------------------------------------------------------------------- patterns


@dataclass(frozen=True, eq=False)
class _Reduced:
    """Data reduced to sums and cross products per missing pattern, on the standardised scale.

    Everything stays in full ``p``-column coordinates: a pattern's sums are 0 in its
    missing columns and its cross products 0 outside its (observed, observed) block. Then
    patterns with different observed columns can be stacked and handled by one batched
    operation instead of a Python loop over patterns.
    """

    n_rows: int
    loc: np.ndarray  # (p,) observed means
    scale: np.ndarray  # (p,) observed standard deviations (1 where zero)
    start_var: np.ndarray  # (p,) observed variances on the standardised scale (1 or 0)
    observed: np.ndarray  # (g, p) float 0/1, which columns each pattern observes
    n: np.ndarray  # (g,) rows in each pattern
    sums: np.ndarray  # (g, p) sums of the observed values
    cross: np.ndarray  # (g, p, p) sums of products of values observed together

    @property
    def n_patterns(self) -> int:
        return int(self.n.shape[0])


def _reduce(x: np.ndarray) -> _Reduced:
    """Centre and scale ``x`` and reduce it to sufficient statistics per missing pattern.

    ``x`` is float, has no all-missing row and at least one observed value per column. Only
    this step touches the rows; every EM iteration afterwards costs the same whatever ``n``.
    """
    p = x.shape[1]
    observed = ~np.isnan(x)
    loc = np.nanmean(x, axis=0)
    scale = np.nanstd(x, axis=0)
    start_var = np.where(scale > 0, 1.0, 0.0)
    scale = np.where(scale > 0, scale, 1.0)
    # Missing cells become 0 so that sums and cross products only count observed values.
    z = np.where(observed, (x - loc) / scale, 0.0)

    uniq, inverse, counts = np.unique(observed, axis=0, return_inverse=True, return_counts=True)
    order = np.argsort(inverse.reshape(-1), kind="stable")
    z_sorted = z[order]
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    sums = np.add.reduceat(z_sorted, starts, axis=0)
    # One matrix product per pattern (not per row); an (n, p, p) array of row outer products
    # would be faster to write but needs n * p² memory.
    cross = np.empty((uniq.shape[0], p, p))
    for j, (s, c) in enumerate(zip(starts, counts, strict=True)):
        block = z_sorted[s : s + c]
        cross[j] = block.T @ block
    return _Reduced(
        n_rows=x.shape[0],
        loc=loc,
        scale=scale,
        start_var=start_var,
        observed=uniq.astype(float),
        n=counts.astype(float),
        sums=sums,
        cross=cross,
    )


def _pinv(blocks: np.ndarray) -> np.ndarray:
    """Pseudo-inverses of a stack of symmetric positive semi-definite matrices.

    Eigenvalues at or below :data:`PINV_RTOL` times the largest count as zero; a negative
    eigenvalue can only be rounding. A covariance with the missing rows and columns set to 0
    thus gives ``Σ_oo⁻¹`` in the observed block and 0 elsewhere. Written out with ``eigh``
    because ``numpy.linalg.pinv`` also sorts and takes absolute values on every call, which
    cost most of the EM time.
    """
    w, v = np.linalg.eigh(blocks)
    cut = PINV_RTOL * w[..., -1:]
    inv_w = np.divide(1.0, w, out=np.zeros_like(w), where=w > cut)
    return (v * inv_w[..., None, :]) @ v.swapaxes(-1, -2)


def _observed_inverse(cov: np.ndarray, pair: np.ndarray) -> np.ndarray:
    """``Σ_oo⁻¹`` of every pattern, embedded in a p x p matrix of zeros.

    ``pair`` is ``o oᵀ`` for each pattern's 0/1 observed vector ``o``; multiplying by it
    again clears rounding left by ``eigh`` outside the observed block.
    """
    return _pinv(cov * pair) * pair


def _run_em(data: _Reduced, max_iter: int, tol: float) -> tuple[np.ndarray, np.ndarray, int, bool]:
    """EM on the standardised statistics; returns mean, covariance, iterations, converged."""
    n = data.n_rows
    p = data.loc.shape[0]
    incomplete = data.observed.min(axis=1) == 0
    base_sums = data.sums[~incomplete].sum(axis=0)
    base_cross = data.cross[~incomplete].sum(axis=0)
    if not incomplete.any():
        # Complete data: the M-step on the observed statistics is the closed-form MLE.
        mean = base_sums / n
        cov = base_cross / n - np.outer(mean, mean)
        return mean, (cov + cov.T) / 2, 1, True

    o = data.observed[incomplete]
    m = 1.0 - o
    pair_oo = o[:, :, None] * o[:, None, :]
    pair_mm = m[:, :, None] * m[:, None, :]
    eye_o = o[:, :, None] * np.eye(p)
    counts = data.n[incomplete]
    sums = data.sums[incomplete]
    cross = data.cross[incomplete]

    mean = np.zeros(p)
    cov = np.diag(data.start_var)
    converged = False
    n_iter = 0
    while n_iter < max_iter:
        n_iter += 1
        # E-step. Given the observed part, the missing part of a row is normal with mean
        # a + B x_o and covariance C, where B = Σ_mo Σ_oo⁻¹, a = μ_m − B μ_o and
        # C = Σ_mm − Σ_mo Σ_oo⁻¹ Σ_om. In full coordinates x̂ = a + R x with R = I_o + B.
        inv_oo = _observed_inverse(cov, pair_oo)
        b = (cov * m[:, :, None]) @ inv_oo  # rows: missing columns, columns: observed
        resid = (cov - cov @ inv_oo @ cov) * pair_mm
        a = m * mean - b @ mean
        reg = eye_o + b
        fitted_sums = sums + np.einsum("gij,gj->gi", b, sums)  # R Σ x
        # Expected Σ x̂ and Σ x̂ x̂ᵀ + n C over each pattern's rows, summed over patterns.
        t1 = base_sums + (counts[:, None] * a + fitted_sums).sum(axis=0)
        t2 = (
            base_cross
            + np.einsum("g,gij->ij", counts, a[:, :, None] * a[:, None, :] + resid)
            + (reg @ cross @ reg.swapaxes(1, 2)).sum(axis=0)
        )
        a_s = a.T @ fitted_sums
        t2 += a_s + a_s.T
        # M-step: maximum likelihood, divisor n.
        new_mean = t1 / n
        new_cov = t2 / n - np.outer(new_mean, new_mean)
        new_cov = (new_cov + new_cov.T) / 2
        change = max(np.max(np.abs(new_mean - mean)), np.max(np.abs(new_cov - cov)))
        mean, cov = new_mean, new_cov
        if change < tol:
            converged = True
            break
    return mean, cov, n_iter, converged


# --------------------------------------------------------------------------- validation


def _check_options(max_iter: int, tol: float) -> None:
    if isinstance(max_iter, bool) or not isinstance(max_iter, int | np.integer) or max_iter < 1:
        raise OptionError(f"max_iter must be a positive integer, got {max_iter!r}")
    if isinstance(tol, bool) or not isinstance(tol, int | float | np.floating):
        raise OptionError(f"tol must be a positive number, got {tol!r}")
    if not (np.isfinite(tol) and tol > 0):
        raise OptionError(f"tol must be a positive number, got {tol!r}")


def _as_matrix(X: Any) -> np.ndarray:
    """``X`` as a new 2-D float array; booleans, strings, objects and infinities refused."""
    arr = np.asarray(X)
    if arr.ndim != 2:
        raise DataError(f"data must be two-dimensional (rows x columns), got shape {arr.shape}")
    if arr.dtype.kind not in "iuf":
        raise DataError(
            f"data must be numeric (integers or floats, NaN for missing), got dtype {arr.dtype}"
        )
    arr = arr.astype(float)  # a copy: the caller's array is never written to
    if np.isinf(arr).any():
        raise DataError("data contains infinite values; only NaN may mark a missing value")
    return arr


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


# --------------------------------------------------------------------------- public API


def em_mvn(X: np.ndarray, *, max_iter: int = 500, tol: float = 1e-8) -> EMResult:
    """Maximum-likelihood mean and covariance of a multivariate normal with missing values.

    The EM algorithm for incomplete normal data (Dempster, Laird & Rubin 1977, *JRSS B*
    39(1); Little & Rubin, *Statistical Analysis with Missing Data*, ch. 11). For a row with
    observed part ``x_o`` and missing part ``x_m``, the E-step replaces ``x_m`` by
    ``E[x_m | x_o] = μ_m + Σ_mo Σ_oo⁻¹ (x_o − μ_o)`` and adds the conditional covariance
    ``Σ_mm − Σ_mo Σ_oo⁻¹ Σ_om`` to the expected cross products; the M-step sets ``μ`` to the
    expected sums divided by ``n`` and ``Σ`` to the expected cross products divided by ``n``
    minus ``μ μᵀ``.

    Rows with every value missing carry no information and are dropped first. Rows are
    reduced once to sums and cross products per missing pattern, and each iteration works on
    those, batching patterns that observe the same number of columns, so an iteration costs
    the same for 200 rows or 200,000.

    The start is the observed mean of each column with a diagonal covariance of the
    observed variances (``ddof=0``). Covariance blocks are inverted with a pseudo-inverse on
    the standardised scale (eigenvalues under :data:`PINV_RTOL` times the largest count as
    zero), so a constant or exactly collinear column does not stop the algorithm; its
    conditional expectation then ignores the redundant direction.

    Parameters
    ----------
    X : ndarray of shape (n, p)
        Numeric data, ``NaN`` for missing. Not modified.
    max_iter : int, default 500
        Most EM iterations to run.
    tol : float, default 1e-8
        Stop when no mean and no covariance entry changes by more than ``tol`` in one
        iteration, measured in units of the observed standard deviations (so on the
        correlation scale for the covariance).

    Returns
    -------
    EMResult
        ``mean`` (p,), ``cov`` (p, p) with divisor ``n``, ``n_iter`` and ``converged``.
        Complete data gives ``numpy.mean`` and ``numpy.cov(..., bias=True)`` in one step.

    Raises
    ------
    DataError
        If ``X`` is not a 2-D numeric array, holds infinities, has no row with an observed
        value, or has a column with no observed value.
    OptionError
        If ``max_iter`` or ``tol`` is not positive.
    """
    _check_options(max_iter, tol)
    x = _as_matrix(X)
    x = x[~np.isnan(x).all(axis=1)]
    if x.shape[0] == 0 or x.shape[1] == 0:
        raise DataError("EM needs at least one row and one column with an observed value")
    empty = np.flatnonzero(np.isnan(x).all(axis=0))
    if empty.size:
        raise DataError(
            f"column(s) {', '.join(map(str, empty))} have no observed value; EM cannot "
            "estimate their mean"
        )
    data = _reduce(x)
    mean_z, cov_z, n_iter, converged = _run_em(data, max_iter, tol)
    mean = data.loc + data.scale * mean_z
    cov = cov_z * np.outer(data.scale, data.scale)
    mean.setflags(write=False)
    cov.setflags(write=False)
    return EMResult(mean=mean, cov=cov, n_iter=int(n_iter), converged=bool(converged))


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
    if isinstance(X, pd.DataFrame):
        x, names = _frame_to_matrix(X, columns)
    else:
        x = _as_matrix(X)
        if columns is None:
            names = [str(i) for i in range(x.shape[1])]
        else:
            names = [str(c) for c in columns]
            if len(names) != x.shape[1]:
                raise DataError(
                    f"got {len(names)} column names for an array of {x.shape[1]} columns"
                )

    observed = ~np.isnan(x)
    lo = np.where(observed, x, np.inf).min(axis=0, initial=np.inf)
    hi = np.where(observed, x, -np.inf).max(axis=0, initial=-np.inf)
    keep = hi > lo  # at least two distinct observed values
    dropped = [nm for nm, k in zip(names, keep, strict=True) if not k]
    used = [nm for nm, k in zip(names, keep, strict=True) if k]
    x = x[:, keep]
    x = x[~np.isnan(x).all(axis=1)]
    n, p = x.shape

    def untestable(why: str, patterns: int = 0, df: int = 0) -> LittleTest:
        return LittleTest(None, df, None, patterns, n, used, dropped, False, why)

    if p < 2:
        return untestable(
            f"Not testable: {p} usable column(s), but the test compares at least two "
            "(a usable column has two or more distinct observed values)."
        )
    if n <= p:
        return untestable(
            f"Not testable: {n} rows with an observed value, but estimating a {p}-column "
            f"covariance needs at least {p + 1}."
        )
    data = _reduce(x)
    df = int(data.observed.sum()) - p
    if data.n_patterns == 1:
        # A single pattern is always the complete one: a column missing in every row has
        # been dropped above.
        return untestable(
            "Not testable: no value is missing in the columns used, so there are no groups "
            "of rows to compare.",
            1,
            df,
        )
    if df == 0:
        return untestable(
            "Not testable: the missing patterns share no observed column, so there are "
            "zero degrees of freedom.",
            data.n_patterns,
            df,
        )

    mean, cov, n_iter, converged = _run_em(data, max_iter, tol)
    o = data.observed
    # Pattern mean minus EM mean, 0 in the missing columns, where inv_oo is 0 as well.
    delta = data.sums / data.n[:, None] - o * mean
    inv_oo = _observed_inverse(cov, o[:, :, None] * o[:, None, :])
    statistic = float(data.n @ np.einsum("gi,gij,gj->g", delta, inv_oo, delta))
    p_value = float(scipy.stats.chi2.sf(statistic, df))
    note = _READING
    if not converged:
        note += (
            f" EM stopped after {n_iter} iterations without converging, so the statistic is "
            "approximate."
        )
    return LittleTest(statistic, int(df), p_value, data.n_patterns, n, used, dropped, True, note)
