"""Rubin's rules: combine one analysis run on each of m imputed datasets.

Each completed dataset gives an estimate ``Q_i`` of the same quantity and its complete-data
variance ``U_i`` (the squared standard error the analysis would report if the data had no
holes). Rubin (1987, *Multiple Imputation for Nonresponse in Surveys*, Wiley, ch. 3) pools
them as

    Q̄ = mean(Q_i)                      pooled estimate
    W̄ = mean(U_i)                      within-imputation variance
    B = var(Q_i), divisor m - 1        between-imputation variance
    T = W̄ + (1 + 1/m) B                total variance; the standard error is sqrt(T)
    r = (1 + 1/m) B / W̄                relative increase in variance due to nonresponse
    ν_m = (m - 1) (1 + 1/r)²           degrees of freedom
    λ = (r + 2 / (ν_m + 3)) / (r + 1)  fraction of missing information

and with small complete-data degrees of freedom ``ν₀`` the Barnard & Rubin (1999,
*Biometrika* 86(4):948-955) degrees of freedom

    γ = (1 + 1/m) B / T,   ν_obs = (ν₀ + 1) / (ν₀ + 3) · ν₀ · (1 - γ),
    ν* = (1/ν_m + 1/ν_obs)⁻¹

which never exceed ``ν₀``. The interval is ``Q̄ ± t_{df, 1-α/2} sqrt(T)``. The relative
efficiency of m imputations against infinitely many is ``(1 + λ/m)⁻¹`` (Rubin 1987).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats

from imputelab.checks import check_count, check_share
from imputelab.errors import DataError, OptionError

__all__ = ["PooledResult", "pool", "relative_efficiency"]


@dataclass
class PooledResult:
    """Rubin's-rules summary of m analyses (one per imputed dataset).

    Every numeric attribute is a float for one parameter, or an array with one entry per
    parameter when several were pooled at once.

    Attributes
    ----------
    estimate : float or ndarray
        Pooled estimate Q̄.
    se : float or ndarray
        Pooled standard error sqrt(T).
    df : float or ndarray
        Degrees of freedom of the t reference distribution (Barnard-Rubin when
        ``df_complete`` was given); ``inf`` when the between variance is 0 and no
        ``df_complete`` was given, in which case the interval is the normal one.
    ci_low, ci_high : float or ndarray
        Bounds of the ``1 - alpha`` confidence interval.
    fmi : float or ndarray
        Fraction of missing information λ.
    riv : float or ndarray
        Relative increase in variance r.
    relative_efficiency : float or ndarray
        ``(1 + λ/m)⁻¹``.
    within, between, total : float or ndarray
        W̄, B and T.
    m : int
        Number of imputed datasets.
    alpha : float
    df_complete : float or None
        Complete-data degrees of freedom ν₀, if given.
    notes : list of str
        Things a reader of the result should know (a zero between variance).
    """

    estimate: Any
    se: Any
    df: Any
    ci_low: Any
    ci_high: Any
    fmi: Any
    riv: Any
    relative_efficiency: Any
    within: Any
    between: Any
    total: Any
    m: int
    alpha: float
    df_complete: float | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def ci(self) -> tuple[Any, Any]:
        """``(ci_low, ci_high)``."""
        return self.ci_low, self.ci_high

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict; an infinite ``df`` becomes ``None``."""
        def plain(value: Any) -> Any:
            if isinstance(value, np.ndarray):
                return [plain(v) for v in value.tolist()]
            value = float(value)
            return None if np.isinf(value) else value

        keys = ("estimate", "se", "df", "ci_low", "ci_high", "fmi", "riv",
                "relative_efficiency", "within", "between", "total")
        out = {key: plain(getattr(self, key)) for key in keys}
        out.update(m=self.m, alpha=self.alpha, notes=list(self.notes),
                   df_complete=None if self.df_complete is None else plain(self.df_complete))
        return out


def relative_efficiency(fmi: Any, m: int) -> Any:
    """Efficiency of ``m`` imputations relative to infinitely many, ``(1 + λ/m)⁻¹``.

    Rubin (1987), *Multiple Imputation for Nonresponse in Surveys*.

    Examples
    --------
    >>> round(relative_efficiency(0.3, 5), 2)
    0.94
    """
    m = check_count(m, "m")
    value = 1.0 / (1.0 + np.asarray(fmi, float) / m)
    return value if np.ndim(value) else float(value)


def _as_table(values: Any, what: str) -> np.ndarray:
    array = np.asarray(values, dtype=float)
    if array.ndim == 1:
        array = array[:, None]
    if array.ndim != 2:
        raise DataError(f"pool: {what} must have one row per imputed dataset (shape (m,) or "
                        f"(m, k)), got shape {np.shape(values)}")
    if not np.isfinite(array).all():
        raise DataError(f"pool: {what} must be finite numbers")
    return array


def _checked_pair(estimates: Any, variances: Any, df_complete: float | None
                  ) -> tuple[np.ndarray, np.ndarray]:
    """The estimates and variances as (m, k) tables, checked for Rubin's rules."""
    if df_complete is not None and not df_complete > 0:
        raise OptionError(f"pool: df_complete must be positive, got {df_complete}")
    q = _as_table(estimates, "estimates")
    u = _as_table(variances, "variances")
    if q.shape != u.shape:
        raise DataError(f"pool: estimates and variances differ in shape: {np.shape(estimates)} "
                        f"vs {np.shape(variances)}")
    if q.shape[0] < 2:
        raise DataError(f"pool: Rubin's rules need at least 2 imputed datasets, got "
                        f"{q.shape[0]}")
    if (u < 0).any():
        raise DataError("pool: variances must not be negative")
    return q, u


def _degrees_of_freedom(riv: np.ndarray, gamma: np.ndarray, m: int,
                        df_complete: float | None) -> tuple[np.ndarray, np.ndarray]:
    """Rubin's ν_m, and the Barnard & Rubin (1999) small-sample ν when ``df_complete``."""
    with np.errstate(divide="ignore"):
        df_m = np.where(riv > 0, (m - 1) * (1.0 + 1.0 / np.where(riv > 0, riv, 1.0)) ** 2,
                        np.inf)
    if df_complete is None or not np.isfinite(df_complete):
        return df_m, df_m
    df_obs = (df_complete + 1.0) / (df_complete + 3.0) * df_complete * (1.0 - gamma)
    return df_m, 1.0 / (1.0 / df_m + 1.0 / df_obs)


def pool(estimates: Any, variances: Any, *, df_complete: float | None = None,
         alpha: float = 0.05) -> PooledResult:
    """Combine per-dataset estimates and variances by Rubin's rules.

    Parameters
    ----------
    estimates : array-like of shape (m,) or (m, k)
        One estimate per imputed dataset (rows), of one or ``k`` parameters (columns).
    variances : array-like, same shape as ``estimates``
        The complete-data variance (squared standard error) of each estimate.
    df_complete : float, optional
        Degrees of freedom the analysis would have without holes (e.g. ``n - 1`` for a mean,
        ``n - p`` for a regression); gives the Barnard & Rubin (1999) small-sample degrees of
        freedom. ``inf`` is allowed and equals not giving it.
    alpha : float, default=0.05
        One minus the confidence level of the interval.

    Returns
    -------
    PooledResult
        Floats for one parameter, arrays of length ``k`` for several.

    Raises
    ------
    DataError
        Fewer than two datasets, shapes that differ, negative or non-finite values, or a
        within variance of 0 (Rubin's rules need complete-data variances).
    OptionError
        ``alpha`` outside (0, 1) or ``df_complete`` not positive.

    Notes
    -----
    When the estimates do not vary (B = 0) and no ``df_complete`` is given, ν_m is
    infinite and the interval uses the normal quantile; the result's ``notes`` say so,
    since identical estimates usually mean the datasets were copies of one fill, not draws.

    Examples
    --------
    >>> result = pool([9.6, 9.8, 10.0, 10.2, 10.4], [1.2] * 5)
    >>> round(result.riv, 3), round(result.df, 1)
    (0.1, 484.0)
    """
    alpha = check_share(alpha, "alpha")
    q, u = _checked_pair(estimates, variances, df_complete)
    m = q.shape[0]
    scalar = np.ndim(estimates) == 1

    q_bar = q.mean(axis=0)
    w = u.mean(axis=0)
    if (w == 0).any():
        raise DataError("pool: the mean within-imputation variance is 0 for parameter(s) "
                        f"{np.flatnonzero(w == 0).tolist()}; Rubin's rules need complete-data "
                        "variances")
    b = q.var(axis=0, ddof=1)
    inflated = (1.0 + 1.0 / m) * b
    total = w + inflated
    riv = inflated / w
    df_m, df = _degrees_of_freedom(riv, inflated / total, m, df_complete)
    fmi = (riv + 2.0 / (df_m + 3.0)) / (riv + 1.0)
    se = np.sqrt(total)
    quantile = np.where(np.isfinite(df), stats.t.ppf(1.0 - alpha / 2.0, np.where(
        np.isfinite(df), df, 1.0)), stats.norm.ppf(1.0 - alpha / 2.0))
    notes = []
    if np.isinf(df).any():
        which = "" if scalar else f" (parameters {np.flatnonzero(np.isinf(df)).tolist()})"
        notes.append(f"the estimates do not vary across the {m} datasets{which}: the between "
                     "variance is 0, the degrees of freedom are infinite and the interval is "
                     "the normal one; identical estimates usually mean copies of one fill, "
                     "not draws")

    def out(values: np.ndarray) -> Any:
        return float(values[0]) if scalar else values

    return PooledResult(
        estimate=out(q_bar), se=out(se), df=out(df),
        ci_low=out(q_bar - quantile * se), ci_high=out(q_bar + quantile * se),
        fmi=out(fmi), riv=out(riv), relative_efficiency=out(1.0 / (1.0 + fmi / m)),
        within=out(w), between=out(b), total=out(total), m=m, alpha=float(alpha),
        df_complete=None if df_complete is None else float(df_complete), notes=notes,
    )
