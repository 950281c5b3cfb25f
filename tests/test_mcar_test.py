"""Tests of imputelab.survey.diagnostics.mcar_test: EM estimates, then Little's MCAR test.

Sources: Little (1988), JASA 83(404):1198-1202 for the statistic; Little & Rubin,
*Statistical Analysis with Missing Data* (2nd ed. 2002) for EM and the monotone closed form;
numpy and scipy as reference libraries. Statistical checks use fixed seeds, so they are
deterministic; their bounds are several standard errors wide.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import scipy.optimize
import scipy.stats

from imputelab.errors import DataError, OptionError
from imputelab.survey.diagnostics.mcar_test import EMResult, LittleTest, em_mvn, little_mcar_test

SEEDS = [0, 1, 2]
CORR4 = np.array(
    [
        [1.0, 0.5, 0.3, 0.2],
        [0.5, 1.0, 0.4, 0.3],
        [0.3, 0.4, 1.0, 0.5],
        [0.2, 0.3, 0.5, 1.0],
    ]
)


def normal_data(rng: np.random.Generator, n: int, cov: np.ndarray, mean=None) -> np.ndarray:
    mean = np.zeros(cov.shape[0]) if mean is None else np.asarray(mean, dtype=float)
    return mean + rng.standard_normal((n, cov.shape[0])) @ np.linalg.cholesky(cov).T


def punch_mcar(rng: np.random.Generator, x: np.ndarray, rate: float) -> np.ndarray:
    out = x.copy()
    out[rng.random(x.shape) < rate] = np.nan
    return out


def bivariate_monotone(seed: int, n: int = 400) -> tuple[np.ndarray, np.ndarray]:
    """x complete; y missing more often when x is high (MAR on x), so the groups differ."""
    rng = np.random.default_rng(seed)
    xy = normal_data(rng, n, np.array([[2.0, 1.2], [1.2, 3.0]]), mean=[5.0, -1.0])
    x, y = xy[:, 0], xy[:, 1].copy()
    y[rng.random(n) < np.where(x > 5.0, 0.45, 0.15)] = np.nan
    return x, y


# --------------------------------------------------------------------------- EM


@pytest.mark.parametrize("seed", SEEDS)
def test_em_on_complete_data_is_the_sample_mean_and_biased_covariance(seed: int) -> None:
    rng = np.random.default_rng(seed)
    x = normal_data(rng, 300, CORR4 * 4.0, mean=[10.0, -3.0, 0.5, 100.0])
    result = em_mvn(x)
    # reference library: numpy.mean and numpy.cov(bias=True); the normal MLE of the
    # covariance has divisor n (Anderson 2003, An Introduction to Multivariate Statistical
    # Analysis, 3rd ed., sec. 3.2; from memory)
    np.testing.assert_allclose(result.mean, x.mean(axis=0), rtol=0, atol=1e-10)
    np.testing.assert_allclose(result.cov, np.cov(x, rowvar=False, bias=True), rtol=0, atol=1e-10)
    assert result.converged
    assert result.n_iter == 1


def test_em_recovers_the_true_parameters_under_mcar() -> None:
    rng = np.random.default_rng(11)
    n = 6000
    mean = np.array([1.0, -2.0, 0.5, 3.0])
    cov = CORR4 * np.outer([1.0, 2.0, 0.5, 1.5], [1.0, 2.0, 0.5, 1.5])
    x = punch_mcar(rng, normal_data(rng, n, cov, mean), 0.2)
    result = em_mvn(x)
    assert result.converged
    # ML under MCAR is consistent (Little & Rubin 2002, ch. 6 and 11). Bounds of 5 normal-
    # theory standard errors of the complete-data estimates, var(s_ij) = (σ_ii σ_jj + σ_ij²)/n
    # (Anderson 2003, sec. 3.3; from memory), using only the 80 % of rows a column keeps.
    n_eff = 0.8 * n
    se_mean = np.sqrt(np.diag(cov) / n_eff)
    se_cov = np.sqrt((np.outer(np.diag(cov), np.diag(cov)) + cov**2) / n_eff)
    assert np.all(np.abs(result.mean - mean) < 5 * se_mean)
    assert np.all(np.abs(result.cov - cov) < 5 * se_cov)


@pytest.mark.parametrize("seed", SEEDS)
def test_em_equals_the_closed_form_ml_estimate_for_a_monotone_bivariate_pattern(
    seed: int,
) -> None:
    x, y = bivariate_monotone(seed)
    result = em_mvn(np.column_stack([x, y]))
    assert result.converged
    # Closed-form ML for monotone bivariate normal data (Anderson 1957, JASA 52:200-203;
    # Little & Rubin 2002, sec. 7.2): regress y on x in the complete cases.
    cc = ~np.isnan(y)
    xc, yc = x[cc], y[cc]
    s_xx_cc = np.var(xc)
    beta = np.mean((xc - xc.mean()) * (yc - yc.mean())) / s_xx_cc
    resid_var = np.var(yc) - beta**2 * s_xx_cc
    mu_x, s_xx = x.mean(), np.var(x)
    mu_y = yc.mean() + beta * (mu_x - xc.mean())
    s_xy = beta * s_xx
    s_yy = resid_var + beta**2 * s_xx
    np.testing.assert_allclose(result.mean, [mu_x, mu_y], rtol=0, atol=1e-6)
    np.testing.assert_allclose(result.cov, [[s_xx, s_xy], [s_xy, s_yy]], rtol=0, atol=1e-6)


def _observed_loglik(x: np.ndarray, mean: np.ndarray, cov: np.ndarray) -> float:
    """Observed-data log-likelihood, each row's observed part ~ N(μ_o, Σ_oo).

    Little & Rubin 2002, eq. 6.7, with scipy as the density (rows grouped by pattern only so
    that each pattern is one scipy call).
    """
    observed = ~np.isnan(x)
    total = 0.0
    for pattern in np.unique(observed, axis=0):
        rows = x[(observed == pattern).all(axis=1)][:, pattern]
        dist = scipy.stats.multivariate_normal(mean[pattern], cov[np.ix_(pattern, pattern)])
        total += float(np.sum(dist.logpdf(rows)))
    return total


def test_em_reaches_the_maximum_of_the_observed_data_likelihood() -> None:
    rng = np.random.default_rng(5)
    p = 3
    x = punch_mcar(rng, normal_data(rng, 150, CORR4[:p, :p], mean=[1.0, 2.0, 3.0]), 0.25)
    x = x[~np.isnan(x).all(axis=1)]
    result = em_mvn(x, tol=1e-12)
    tri = np.tril_indices(p)

    def unpack(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        chol = np.zeros((p, p))
        chol[tri] = theta[p:]
        return theta[:p], chol @ chol.T

    def negloglik(theta: np.ndarray) -> float:
        mean, cov = unpack(theta)
        return -_observed_loglik(x, mean, cov)

    start = np.concatenate([np.nanmean(x, axis=0), np.eye(p)[tri]])
    # reference library: scipy.optimize.minimize on the likelihood itself, started away from
    # the EM answer; EM's fixed point is the ML estimate (Dempster, Laird & Rubin 1977).
    opt = scipy.optimize.minimize(negloglik, start, method="BFGS", options={"gtol": 1e-7})
    opt_mean, opt_cov = unpack(opt.x)
    np.testing.assert_allclose(result.mean, opt_mean, rtol=0, atol=1e-4)
    np.testing.assert_allclose(result.cov, opt_cov, rtol=0, atol=1e-4)
    assert _observed_loglik(x, result.mean, result.cov) >= -opt.fun - 1e-7


def test_em_drops_all_missing_rows_and_survives_a_singular_covariance() -> None:
    rng = np.random.default_rng(3)
    base = punch_mcar(rng, normal_data(rng, 200, CORR4[:3, :3]), 0.15)
    # An exact copy of column 0 and a constant column make the covariance singular.
    copy0 = base[:, 0].copy()
    copy0[rng.random(200) < 0.1] = np.nan
    const = np.where(rng.random(200) < 0.1, np.nan, 7.0)
    x = np.column_stack([base, copy0, const])
    padded = np.vstack([x, np.full((5, 5), np.nan)])
    result = em_mvn(padded)
    assert np.all(np.isfinite(result.cov))
    # A constant column has mean 7 and no variance by definition (no source needed: its
    # observed values are all 7 and EM only ever fills it with its mean).
    assert result.mean[4] == pytest.approx(7.0, abs=1e-12)
    np.testing.assert_allclose(result.cov[4], 0.0, atol=1e-12)
    # All-missing rows carry no likelihood (Little & Rubin 2002, sec. 6.2): same result.
    again = em_mvn(x)
    np.testing.assert_array_equal(result.mean, again.mean)
    np.testing.assert_array_equal(result.cov, again.cov)


def test_em_result_is_frozen_and_read_only() -> None:
    result = em_mvn(np.array([[1.0, 2.0], [2.0, np.nan], [4.0, 1.0], [0.5, 3.0]]))
    assert isinstance(result, EMResult)
    with pytest.raises(AttributeError, match="cannot assign"):
        result.n_iter = 3  # type: ignore[misc]
    with pytest.raises(ValueError, match="read-only"):
        result.mean[0] = 0.0


def test_em_reports_non_convergence() -> None:
    x, y = bivariate_monotone(0)
    result = em_mvn(np.column_stack([x, y]), max_iter=2)
    assert result.n_iter == 2
    assert not result.converged


# --------------------------------------------------------------------------- Little's test


def _d2_written_out(x: np.ndarray) -> tuple[float, int]:
    """Little (1988), eq. for d² and its df, one pattern at a time with an explicit inverse."""
    x = x[~np.isnan(x).all(axis=1)]
    est = em_mvn(x, tol=1e-12)
    observed = ~np.isnan(x)
    d2, df = 0.0, -x.shape[1]
    for pattern in np.unique(observed, axis=0):
        rows = (observed == pattern).all(axis=1)
        delta = x[rows][:, pattern].mean(axis=0) - est.mean[pattern]
        inv = np.linalg.inv(est.cov[np.ix_(pattern, pattern)])
        d2 += rows.sum() * float(delta @ inv @ delta)
        df += int(pattern.sum())
    return d2, df


@pytest.mark.parametrize("seed", SEEDS)
def test_two_variable_test_is_the_squared_two_sample_z(seed: int) -> None:
    x, y = bivariate_monotone(seed)
    result = little_mcar_test(np.column_stack([x, y]))
    # Little (1988) notes the link with the t-test. With X complete and Y partly missing the
    # complete pattern's Y deviation is β(x̄1 − μ̂_x), its quadratic form collapses to
    # n1 (x̄1 − μ̂_x)² / σ̂²_x, and the sum over both patterns is the squared z statistic with
    # the ML variance of X (divisor n) over all rows.
    seen = ~np.isnan(y)
    n1, n2 = seen.sum(), (~seen).sum()
    z2 = (x[seen].mean() - x[~seen].mean()) ** 2 / (np.var(x) * (1 / n1 + 1 / n2))
    assert result.testable
    assert result.df == 1
    assert result.statistic == pytest.approx(z2, rel=1e-8)
    # reference library: scipy.stats.norm, two-sided z p-value = chi-square(1) tail
    z_p = 2 * scipy.stats.norm.sf(np.sqrt(z2))
    assert result.p_value == pytest.approx(z_p, rel=1e-6)
    assert result.patterns == 2
    assert result.rows == x.size


@pytest.mark.parametrize("seed", SEEDS)
def test_statistic_matches_the_formula_written_out_per_pattern(seed: int) -> None:
    rng = np.random.default_rng(100 + seed)
    x = punch_mcar(rng, normal_data(rng, 300, CORR4), 0.2)
    # make it MAR so the statistic is large and any mix-up of patterns shows
    x[rng.random(300) < np.where(np.nan_to_num(x[:, 0]) > 0, 0.4, 0.0), 2] = np.nan
    expected_d2, expected_df = _d2_written_out(x)
    result = little_mcar_test(x, tol=1e-12)
    # Little (1988): d² = Σ_j n_j δ_jᵀ Σ̂_obs,j⁻¹ δ_j, df = Σ_j p_j − p
    assert result.df == expected_df
    assert result.statistic == pytest.approx(expected_d2, rel=1e-8)
    # reference library: scipy.stats.chi2 upper tail
    assert result.p_value == pytest.approx(scipy.stats.chi2.sf(expected_d2, expected_df))


def _rejection_rate(make, reps: int, seed: int) -> float:
    rng = np.random.default_rng(seed)
    rejected = 0
    for _ in range(reps):
        result = little_mcar_test(make(rng))
        assert result.testable
        rejected += result.p_value < 0.05
    return rejected / reps


def test_size_under_mcar_is_close_to_nominal() -> None:
    def make(rng: np.random.Generator) -> np.ndarray:
        return punch_mcar(rng, normal_data(rng, 200, CORR4), 0.15)

    rate = _rejection_rate(make, 300, seed=2024)
    # Under MCAR d² is asymptotically χ²_df (Little 1988), so about 5 % of tests reject at
    # α = 0.05. Bounds 0.03-0.08 are about ±2 binomial standard errors for 300 draws
    # (common practice, no source); 4000 draws of this design gave 0.045.
    assert 0.03 <= rate <= 0.08


def test_power_under_strong_mar() -> None:
    def make(rng: np.random.Generator) -> np.ndarray:
        x = normal_data(rng, 200, CORR4)
        out = punch_mcar(rng, x, 0.1)
        # column 1 goes missing far more often when column 0 (always observed) is high
        out[:, 0] = x[:, 0]
        out[rng.random(200) < np.where(x[:, 0] > 0, 0.5, 0.05), 1] = np.nan
        return out

    rate = _rejection_rate(make, 300, seed=7)
    # Little (1988) designs the test to detect patterns whose means differ, which MAR on a
    # correlated observed column causes; the 80 % floor is the brief's (common practice,
    # no source).
    assert rate >= 0.80


def test_no_missing_value_is_not_testable() -> None:
    rng = np.random.default_rng(0)
    result = little_mcar_test(normal_data(rng, 50, CORR4))
    # Little (1988): one pattern gives df = Σ p_j − p = 0, nothing to compare
    assert not result.testable
    assert result.statistic is None and result.p_value is None
    assert result.patterns == 1 and result.df == 0
    assert "no value is missing" in result.note
    assert result.to_dict()["statistic"] is None


def test_patterns_without_a_shared_column_are_not_testable() -> None:
    x = np.full((20, 2), np.nan)
    x[:10, 0] = np.arange(10.0)
    x[10:, 1] = np.arange(10.0) ** 2
    result = little_mcar_test(x)
    # Little (1988): df = Σ p_j − p = 1 + 1 − 2 = 0
    assert not result.testable
    assert result.df == 0 and result.patterns == 2
    assert "zero degrees of freedom" in result.note


def test_all_missing_rows_are_dropped() -> None:
    rng = np.random.default_rng(4)
    x = punch_mcar(rng, normal_data(rng, 120, CORR4), 0.2)
    x = x[~np.isnan(x).all(axis=1)]
    padded = np.insert(x, [0, 30, 60], np.nan, axis=0)
    base, result = little_mcar_test(x), little_mcar_test(padded)
    # Little (1988) drops rows with no observed value: they carry no information
    assert result.rows == base.rows == x.shape[0]
    assert result.statistic == pytest.approx(base.statistic, rel=1e-12)
    assert result.df == base.df and result.patterns == base.patterns


def test_constant_and_empty_columns_are_dropped_and_listed() -> None:
    rng = np.random.default_rng(8)
    x = punch_mcar(rng, normal_data(rng, 150, CORR4[:3, :3]), 0.2)
    base = little_mcar_test(x, columns=["a", "b", "c"])
    const = np.where(rng.random(150) < 0.3, np.nan, 2.5)
    wide = np.column_stack([x[:, 0], const, x[:, 1:], np.full(150, np.nan)])
    result = little_mcar_test(wide, columns=["a", "flat", "b", "c", "blank"])
    # A constant column has a singular covariance, an empty one no estimate: the test is
    # defined on the columns with variance (Little 1988 assumes Σ positive definite).
    assert result.dropped_columns == ["flat", "blank"]
    assert result.columns == ["a", "b", "c"]
    assert result.statistic == pytest.approx(base.statistic, rel=1e-10)
    assert result.df == base.df


def test_too_few_columns_or_rows_are_not_testable() -> None:
    one = little_mcar_test(np.array([[1.0, 5.0], [np.nan, 5.0], [3.0, 5.0], [2.0, np.nan]]))
    assert not one.testable and one.dropped_columns == ["1"]
    assert "1 usable column(s)" in one.note
    few = little_mcar_test(np.array([[1.0, 2.0, 3.0], [2.0, np.nan, 1.0], [0.0, 1.0, np.nan]]))
    # an ML covariance of p columns needs more than p rows (common practice, no source)
    assert not few.testable and few.rows == 3
    assert "at least 4" in few.note


def test_dataframe_input_reports_column_names_and_selects_columns() -> None:
    rng = np.random.default_rng(9)
    x = punch_mcar(rng, normal_data(rng, 200, CORR4), 0.15)
    frame = pd.DataFrame(x, columns=["temp_c", "load_kg", "door_min", "fuel_l"])
    frame["route"] = pd.array(rng.choice(["north", "coast"], 200), dtype="str")
    frame["stops"] = pd.array(np.where(np.isnan(x[:, 3]), None, rng.integers(0, 5, 200)),
                              dtype="Int64")
    numeric = ["temp_c", "load_kg", "door_min", "fuel_l"]
    result = little_mcar_test(frame, columns=numeric)
    assert result.columns == numeric
    assert result.to_dict()["columns"] == numeric
    # same numbers as the plain array (the input form must not matter)
    same = little_mcar_test(x)
    assert result.statistic == pytest.approx(same.statistic, rel=1e-12)
    # a nullable integer column is numeric; pd.NA counts as missing
    with_int = little_mcar_test(frame, columns=[*numeric, "stops"])
    assert with_int.testable and with_int.columns[-1] == "stops"


def test_to_dict_is_json_ready_with_the_documented_keys() -> None:
    x, y = bivariate_monotone(1)
    result = little_mcar_test(np.column_stack([x, y]))
    assert isinstance(result, LittleTest)
    d = result.to_dict()
    assert set(d) == {"statistic", "df", "p_value", "patterns", "rows", "columns", "testable",
                      "note"}
    assert type(d["statistic"]) is float and type(d["p_value"]) is float
    assert type(d["df"]) is int and type(d["rows"]) is int
    assert json.loads(json.dumps(d)) == d
    assert "small p-value is evidence against MCAR" in d["note"]
    assert "no proof of MCAR" in d["note"]


def test_note_flags_an_unconverged_em() -> None:
    x, y = bivariate_monotone(2)
    result = little_mcar_test(np.column_stack([x, y]), max_iter=1)
    assert result.testable
    assert "without converging" in result.note


def test_bad_input_raises_clear_errors() -> None:
    with pytest.raises(DataError, match="two-dimensional"):
        little_mcar_test(np.arange(5.0))
    with pytest.raises(DataError, match="two-dimensional"):
        em_mvn(np.zeros((2, 2, 2)))
    with pytest.raises(DataError, match="must be numeric"):
        little_mcar_test(np.array([["a", "b"], ["c", "d"]]))
    with pytest.raises(DataError, match="must be numeric"):
        little_mcar_test(np.array([[1.0, None], [2.0, 3.0]], dtype=object))
    with pytest.raises(DataError, match="must be numeric"):
        em_mvn(np.array([[True, False], [False, True]]))
    with pytest.raises(DataError, match="not numeric: 'route'"):
        little_mcar_test(pd.DataFrame({"temp_c": [1.0, 2.0], "route": ["north", "coast"]}))
    with pytest.raises(DataError, match="not numeric: 'sealed'"):
        little_mcar_test(pd.DataFrame({"temp_c": [1.0, 2.0], "sealed": [True, False]}))
    with pytest.raises(DataError, match="unknown column"):
        little_mcar_test(pd.DataFrame({"temp_c": [1.0, 2.0]}), columns=["fuel_l"])
    with pytest.raises(DataError, match="2 column names for an array of 3 columns"):
        little_mcar_test(np.zeros((4, 3)), columns=["a", "b"])
    with pytest.raises(DataError, match="infinite"):
        little_mcar_test(np.array([[1.0, np.inf], [2.0, 3.0]]))
    with pytest.raises(DataError, match="no observed value"):
        em_mvn(np.array([[1.0, np.nan], [2.0, np.nan]]))
    with pytest.raises(OptionError, match="`max_iter` must be a whole number of at least 1"):
        em_mvn(np.eye(3), max_iter=0)
    with pytest.raises(OptionError, match="tol must be a positive number"):
        little_mcar_test(np.eye(3), tol=-1.0)


def test_same_input_gives_the_same_bytes() -> None:
    rng = np.random.default_rng(12)
    x = punch_mcar(rng, normal_data(rng, 500, CORR4), 0.2)
    first, second = little_mcar_test(x), little_mcar_test(x.copy())
    # determinism is a project rule (no source needed)
    assert json.dumps(first.to_dict()).encode() == json.dumps(second.to_dict()).encode()
    a, b = em_mvn(x), em_mvn(x.copy())
    assert a.mean.tobytes() == b.mean.tobytes() and a.cov.tobytes() == b.cov.tobytes()


def test_statistic_does_not_depend_on_row_order_or_units() -> None:
    rng = np.random.default_rng(13)
    x = punch_mcar(rng, normal_data(rng, 300, CORR4), 0.2)
    base = little_mcar_test(x, tol=1e-12)
    shuffled = little_mcar_test(x[rng.permutation(300)], tol=1e-12)
    rescaled = little_mcar_test(x * [1e4, 1e-3, 1.0, 250.0] + [1e6, 0.0, -5.0, 3.0], tol=1e-12)
    # Little (1988): d² sums over patterns (row order is irrelevant) and is a Mahalanobis
    # form on ML estimates, which is invariant under affine changes of each column.
    assert shuffled.statistic == pytest.approx(base.statistic, rel=1e-8)
    assert rescaled.statistic == pytest.approx(base.statistic, rel=1e-8)
