"""Maximum-likelihood mean and covariance of a multivariate normal with missing values (EM).

Dempster, Laird & Rubin (1977), *JRSS B* 39(1); Little & Rubin, *Statistical Analysis with
Missing Data*, ch. 11. :func:`em_mvn` gives the estimates Little's MCAR test
(:mod:`.mcar_test`) compares the patterns' means with. Rows are reduced once to sums and
cross products per missing pattern; every iteration works on those, on columns centred and
scaled by their observed mean and standard deviation (``ddof=0``), which keeps the
convergence test and the pseudo-inverse cut-off independent of the units.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from imputelab.checks import check_count
from imputelab.errors import DataError, OptionError

__all__ = ["PINV_RTOL", "EMResult", "em_mvn"]

#: Relative cut-off of the pseudo-inverse used for every covariance block (on the
#: standardised scale, where variances are about 1): eigenvalues below this fraction of the
#: largest are treated as zero, so a constant or exactly collinear column cannot make the
#: algorithm divide by (almost) zero.
PINV_RTOL = 1e-10



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
    check_count(max_iter, "max_iter")
    if (isinstance(tol, bool) or not isinstance(tol, int | float | np.floating)
            or not (np.isfinite(tol) and tol > 0)):
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
