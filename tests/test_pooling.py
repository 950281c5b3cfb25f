"""Tests for fill.pooling: Rubin's rules against the published formulas, by hand.

Sources: Rubin (1987), *Multiple Imputation for Nonresponse in Surveys* (pooled estimate,
total variance, degrees of freedom, fraction of missing information, relative efficiency);
Barnard & Rubin (1999), *Biometrika* 86(4):948-955 (small-sample degrees of freedom). The
hand values are the ones listed in /work/shared/CHECK_VALUES.md. t and normal quantiles come
from scipy.stats, the reference library.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from imputelab.errors import DataError, OptionError
from imputelab.fill.pooling import PooledResult, pool, relative_efficiency

# Five analyses of one quantity (made up for the test): estimates and squared standard errors
ESTIMATES = [10.2, 9.6, 11.0, 10.5, 9.9]
VARIANCES = [0.30, 0.25, 0.35, 0.28, 0.32]


def test_pool_matches_the_formulas_worked_by_hand():
    # Rubin (1987): every step written out with plain arithmetic on the five analyses
    m = 5
    q_bar = (10.2 + 9.6 + 11.0 + 10.5 + 9.9) / 5  # 10.24
    w = (0.30 + 0.25 + 0.35 + 0.28 + 0.32) / 5  # 0.30
    b = sum((q - q_bar) ** 2 for q in ESTIMATES) / (m - 1)  # 0.293 (divisor m - 1)
    t = w + (1 + 1 / m) * b
    r = (1 + 1 / m) * b / w
    df = (m - 1) * (1 + 1 / r) ** 2
    fmi = (r + 2 / (df + 3)) / (r + 1)
    half = stats.t.ppf(0.975, df) * math.sqrt(t)
    assert q_bar == pytest.approx(10.24) and w == pytest.approx(0.30)
    assert b == pytest.approx(0.293)  # (0.0016 + 0.4096 + 0.5776 + 0.0676 + 0.1156) / 4

    result = pool(ESTIMATES, VARIANCES)
    assert result.m == m
    assert result.estimate == pytest.approx(q_bar, rel=1e-12)
    assert result.within == pytest.approx(w, rel=1e-12)
    assert result.between == pytest.approx(b, rel=1e-12)
    assert result.total == pytest.approx(t, rel=1e-12)
    assert result.se == pytest.approx(math.sqrt(t), rel=1e-12)
    assert result.riv == pytest.approx(r, rel=1e-12)
    assert result.df == pytest.approx(df, rel=1e-12)
    assert result.fmi == pytest.approx(fmi, rel=1e-12)
    assert result.relative_efficiency == pytest.approx(1 / (1 + fmi / m), rel=1e-12)
    assert result.ci == pytest.approx((q_bar - half, q_bar + half), rel=1e-12)
    assert result.notes == []


def test_barnard_rubin_degrees_of_freedom_by_hand():
    # Barnard & Rubin (1999): gamma = (1 + 1/m) B / T,
    # nu_obs = (nu0 + 1) / (nu0 + 3) * nu0 * (1 - gamma), nu* = 1 / (1/nu_m + 1/nu_obs)
    m, nu0 = 5, 30.0
    q_bar = sum(ESTIMATES) / m
    w = sum(VARIANCES) / m
    b = sum((q - q_bar) ** 2 for q in ESTIMATES) / (m - 1)
    t = w + (1 + 1 / m) * b
    nu_m = (m - 1) * (1 + w / ((1 + 1 / m) * b)) ** 2
    gamma = (1 + 1 / m) * b / t
    nu_obs = (nu0 + 1) / (nu0 + 3) * nu0 * (1 - gamma)
    nu = 1 / (1 / nu_m + 1 / nu_obs)
    result = pool(ESTIMATES, VARIANCES, df_complete=nu0)
    assert result.df == pytest.approx(nu, rel=1e-12)
    half = stats.t.ppf(0.975, nu) * math.sqrt(t)
    assert result.ci == pytest.approx((q_bar - half, q_bar + half), rel=1e-12)
    assert result.df_complete == nu0
    # the fraction of missing information keeps Rubin's nu_m (as the formula in the spec)
    assert result.fmi == pytest.approx(pool(ESTIMATES, VARIANCES).fmi, rel=1e-12)


def test_the_check_value_m5_r01_gives_484_degrees_of_freedom():
    # CHECK_VALUES.md (Rubin 1987 formula worked by hand): m = 5, r = 0.1 gives
    # nu_m = 4 * 11^2 = 484. Estimates 10 +- 0.2k have B = 0.1; W = 1.2 makes r = 1.2*0.1/1.2.
    result = pool([9.6, 9.8, 10.0, 10.2, 10.4], [1.2] * 5)
    assert result.between == pytest.approx(0.1, rel=1e-12)
    assert result.riv == pytest.approx(0.1, rel=1e-12)
    assert result.df == pytest.approx(484.0, rel=1e-12)
    assert result.fmi == pytest.approx((0.1 + 2 / 487) / 1.1, rel=1e-12)


def test_relative_efficiency_check_values():
    # CHECK_VALUES.md (Rubin 1987): (1 + lambda/m)^-1 with lambda = 0.3 is 0.91 at m = 3 and
    # 0.94 at m = 5
    assert round(relative_efficiency(0.3, 3), 2) == 0.91
    assert round(relative_efficiency(0.3, 5), 2) == 0.94
    np.testing.assert_allclose(relative_efficiency(np.array([0.3, 0.0]), 5), [1 / 1.06, 1.0])
    with pytest.raises(OptionError, match="`m` must be a whole number of at least 1, got 0"):
        relative_efficiency(0.3, 0)


def test_barnard_rubin_df_never_exceeds_the_complete_data_df_and_tends_to_rubins():
    # Barnard & Rubin (1999): nu* <= nu0 always, and nu* -> nu_m as nu0 -> infinity
    rubin = pool(ESTIMATES, VARIANCES).df
    previous = 0.0
    for nu0 in (2.0, 5.0, 20.0, 100.0, 1e4, 1e8):
        df = pool(ESTIMATES, VARIANCES, df_complete=nu0).df
        assert df <= nu0
        assert previous < df < rubin  # grows with nu0, from below Rubin's
        previous = df
    assert previous == pytest.approx(rubin, rel=1e-5)
    assert pool(ESTIMATES, VARIANCES, df_complete=math.inf).df == rubin


def test_several_parameters_pool_as_each_one_alone():
    rng = np.random.default_rng(3)
    estimates = rng.normal(size=(7, 3)) * [1.0, 0.1, 5.0] + [0.0, 2.0, -1.0]
    variances = rng.uniform(0.5, 2.0, size=(7, 3)) * [1.0, 0.01, 25.0]
    together = pool(estimates, variances, df_complete=40)
    assert together.estimate.shape == (3,)
    for k in range(3):
        alone = pool(estimates[:, k], variances[:, k], df_complete=40)
        for key in ("estimate", "se", "df", "ci_low", "ci_high", "fmi", "riv",
                    "relative_efficiency", "within", "between", "total"):
            assert getattr(together, key)[k] == pytest.approx(getattr(alone, key), rel=1e-12)
    assert isinstance(alone.estimate, float)


def test_equal_estimates_give_infinite_df_and_the_normal_interval():
    # B = 0: r = 0 and nu_m = (m - 1)(1 + 1/0)^2 is infinite, so the t interval becomes the
    # normal one (scipy.stats.norm) and the result says why
    result = pool([4.0, 4.0, 4.0], [0.25, 0.25, 0.25])
    assert math.isinf(result.df)
    assert result.riv == 0.0 and result.fmi == 0.0 and result.relative_efficiency == 1.0
    half = stats.norm.ppf(0.975) * 0.5
    assert result.ci == pytest.approx((4.0 - half, 4.0 + half), rel=1e-12)
    assert len(result.notes) == 1 and "normal" in result.notes[0]
    assert result.to_dict()["df"] is None
    # with complete-data df, Barnard-Rubin gives nu_obs = (nu0+1)/(nu0+3) nu0 (gamma = 0)
    finite = pool([4.0, 4.0, 4.0], [0.25, 0.25, 0.25], df_complete=10)
    assert finite.df == pytest.approx(11 / 13 * 10, rel=1e-12)
    assert finite.notes == []


def test_a_higher_confidence_level_gives_a_wider_interval():
    wide, narrow = pool(ESTIMATES, VARIANCES, alpha=0.01), pool(ESTIMATES, VARIANCES, alpha=0.2)
    assert wide.ci_low < narrow.ci_low < narrow.estimate < narrow.ci_high < wide.ci_high


def test_to_dict_is_json_ready():
    result = pool(np.column_stack([ESTIMATES, [1.0] * 5]), np.column_stack([VARIANCES, [1] * 5]))
    data = result.to_dict()
    text = json.dumps(data, allow_nan=False)
    assert json.loads(text)["df"][1] is None  # the second parameter has B = 0
    assert data["m"] == 5 and data["alpha"] == 0.05
    assert data["estimate"] == pytest.approx([10.24, 1.0])
    assert isinstance(result, PooledResult)


@pytest.mark.parametrize(("estimates", "variances", "kwargs", "error", "match"), [
    ([1.0], [1.0], {}, DataError, "at least 2"),
    ([1.0, 2.0], [1.0, 1.0, 1.0], {}, DataError, "differ in shape"),
    ([1.0, 2.0], [1.0, -1.0], {}, DataError, "negative"),
    ([1.0, np.nan], [1.0, 1.0], {}, DataError, "finite"),
    ([1.0, 2.0], [0.0, 0.0], {}, DataError, "within-imputation variance is 0"),
    (np.ones((2, 2, 2)), np.ones((2, 2, 2)), {}, DataError, "one row per imputed dataset"),
    ([1.0, 2.0], [1.0, 1.0], {"alpha": 1.5}, OptionError, "alpha"),
    ([1.0, 2.0], [1.0, 1.0], {"df_complete": 0}, OptionError, "df_complete"),
])
def test_bad_input_is_refused(estimates, variances, kwargs, error, match):
    with pytest.raises(error, match=match):
        pool(estimates, variances, **kwargs)
