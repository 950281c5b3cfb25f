"""The distribution checks of imputelab.metrics.scores: variance_ratio and correlation_shift.

References: numpy's ``np.var`` for the variances and ``scipy.stats.pearsonr`` for the
correlations; the metrics' own docstrings say which rows they use.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats

from imputelab.errors import DataError
from imputelab.metrics.scores import correlation_shift, variance_ratio

SEEDS = (0, 1, 2)


@pytest.mark.parametrize("seed", SEEDS)
def test_variance_ratio_is_numpy_variance_over_numpy_variance(seed: int) -> None:
    rng = np.random.default_rng(seed)
    true = rng.gamma(2.0, 3.0, size=57)
    filled = 0.5 * true + rng.normal(0.0, 0.4, size=57)
    # numpy as reference: population variances (ddof=0), as the docstring says
    expected = np.var(filled) / np.var(true)
    assert variance_ratio(true, filled) == pytest.approx(expected, rel=1e-12)
    # pandas Series and lists are read the same way
    assert variance_ratio(pd.Series(true), list(filled)) == pytest.approx(expected, rel=1e-12)


def test_variance_ratio_of_a_mean_fill_is_zero_and_of_the_truth_is_one() -> None:
    rng = np.random.default_rng(3)
    true = rng.normal(5.0, 2.0, size=40)
    # a constant has no spread: np.var of it is exactly 0 (numpy as reference)
    assert variance_ratio(true, np.full(40, true.mean())) == 0.0
    assert variance_ratio(true, true) == pytest.approx(1.0, rel=1e-12)
    # the ratio does not care about order, only about spread
    assert variance_ratio(true, true[::-1]) == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize(
    ("true", "filled"),
    [
        ([], []),  # nothing hidden
        ([1.0], [2.0]),  # a single hidden cell has no variance
        ([3.0, 3.0, 3.0], [1.0, 2.0, 3.0]),  # the truth has no spread to keep
    ],
    ids=["empty", "one-cell", "constant-truth"],
)
def test_variance_ratio_is_nan_when_undefined(true: list[float], filled: list[float]) -> None:
    assert math.isnan(variance_ratio(true, filled))


def test_variance_ratio_rejects_unequal_lengths() -> None:
    with pytest.raises(DataError, match="length"):
        variance_ratio([1.0, 2.0, 3.0], [1.0, 2.0])


def _reference_shift(t: np.ndarray, f: np.ndarray, ot: np.ndarray, of: np.ndarray) -> float:
    """Mean |r_filled - r_true| over the other columns, with scipy's Pearson r.

    Rows are those where all four values are known (the docstring's "shared rows").
    """
    shifts = []
    for j in range(ot.shape[1]):
        rows = np.isfinite(t) & np.isfinite(f) & np.isfinite(ot[:, j]) & np.isfinite(of[:, j])
        before = scipy.stats.pearsonr(t[rows], ot[rows, j]).statistic
        after = scipy.stats.pearsonr(f[rows], of[rows, j]).statistic
        shifts.append(abs(after - before))
    return float(np.mean(shifts))


@pytest.mark.parametrize("seed", SEEDS)
def test_correlation_shift_matches_scipy_pearson(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 300
    base = rng.normal(size=n)
    others = np.column_stack([base + rng.normal(scale=s, size=n) for s in (0.3, 1.0, 3.0)])
    true = base + rng.normal(scale=0.5, size=n)
    true[rng.random(n) < 0.1] = np.nan  # cells really missing: no truth to compare with
    others[rng.random(n) < 0.05, 1] = np.nan
    hidden = rng.random(n) < 0.2
    filled = np.where(np.isnan(true), 0.0, true)
    filled[hidden] = np.nanmean(true)  # a mean fill of the hidden cells
    others_filled = np.where(np.isnan(others), 0.0, others)
    expected = _reference_shift(true, filled, others, others_filled)
    assert expected > 0.01  # the mean fill really moved the correlations
    assert correlation_shift(true, filled, others, others_filled) == pytest.approx(
        expected, rel=1e-9)


def test_correlation_shift_is_zero_when_the_fill_is_the_truth() -> None:
    rng = np.random.default_rng(4)
    true = rng.normal(size=50)
    others = np.column_stack([true + rng.normal(size=50), rng.normal(size=50)])
    assert correlation_shift(true, true.copy(), others, others.copy()) == pytest.approx(
        0.0, abs=1e-12)


def test_correlation_shift_skips_an_other_column_without_spread() -> None:
    rng = np.random.default_rng(5)
    true = rng.normal(size=60)
    filled = true.copy()
    filled[:15] = 0.0
    good = true + rng.normal(size=60)
    others = np.column_stack([good, np.full(60, 2.0)])
    # the constant column has no correlation to keep; only the other one counts (scipy's r)
    expected = _reference_shift(true, filled, good[:, None], good[:, None])
    assert correlation_shift(true, filled, others, others) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("case", ["no-other-column", "two-shared-rows", "constant-other"])
def test_correlation_shift_is_nan_without_a_usable_other_column(case: str) -> None:
    true = np.array([1.0, 2.0, 4.0, 8.0, 16.0])
    filled = np.array([1.0, 2.0, 5.0, 8.0, 16.0])
    if case == "no-other-column":
        others = np.empty((5, 0))
    elif case == "two-shared-rows":  # fewer than 3 rows known in both
        others = np.array([[1.0], [2.0], [np.nan], [np.nan], [np.nan]])
    else:
        others = np.full((5, 1), 7.0)
    assert math.isnan(correlation_shift(true, filled, others, others))


def test_correlation_shift_rejects_mismatched_other_columns() -> None:
    t = np.arange(4.0)
    with pytest.raises(DataError, match="shape|length|columns"):
        correlation_shift(t, t, np.column_stack([t, t**2]), np.column_stack([t, t**2, t**3]))
