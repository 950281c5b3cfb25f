"""Fill methods checked against sources outside the project.

Each check names its source beside it: scikit-learn as a reference library, its
documentation, or a textbook formula. Data are seeded; statistical tolerances are several
standard errors wide, so an honest implementation passes with any seed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.impute import KNNImputer, SimpleImputer
from sklearn.linear_model import LogisticRegression
from threadpoolctl import threadpool_limits

from imputelab.methods import get_method


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    # Small linear solves run several times slower spread over BLAS threads.
    with threadpool_limits(limits=1):
        yield


def numeric_with_holes(seed: int, n: int = 250, rate: float = 0.2) -> np.ndarray:
    """Columns of different location and scale, MCAR holes."""
    rng = np.random.default_rng(seed)
    values = rng.normal(size=(n, 4)) * [1.0, 5.0, 0.2, 30.0] + [0.0, 10.0, -3.0, 100.0]
    values[rng.random(values.shape) < rate] = np.nan
    return values


def frame_of(values: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame(values, columns=[f"c{j}" for j in range(values.shape[1])])


def rmse(true: np.ndarray, filled: np.ndarray) -> float:
    return float(np.sqrt(np.mean((np.asarray(filled) - np.asarray(true)) ** 2)))


# --------------------------------------------------------- mean / median / mode vs SimpleImputer


@pytest.mark.parametrize(("method", "strategy"), [("mean", "mean"), ("median", "median")])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_mean_and_median_match_simple_imputer(method: str, strategy: str, seed: int) -> None:
    values = numeric_with_holes(seed)
    # reference library: sklearn.impute.SimpleImputer(strategy="mean" / "median")
    expected = SimpleImputer(strategy=strategy).fit_transform(values)
    got = get_method(method).fit_transform(frame_of(values)).to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=0)


@pytest.mark.parametrize(("method", "strategy"), [("mean", "mean"), ("median", "median")])
def test_fit_on_one_frame_transform_another_matches_simple_imputer(
    method: str, strategy: str
) -> None:
    train, later = numeric_with_holes(3), numeric_with_holes(4, n=80)
    # reference library: sklearn.impute.SimpleImputer, fitted on one array, applied to another
    expected = SimpleImputer(strategy=strategy).fit(train).transform(later)
    got = get_method(method).fit(frame_of(train)).transform(frame_of(later)).to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=0)


def test_mean_documentation_example() -> None:
    # scikit-learn documentation, SimpleImputer docstring example
    # (scikit-learn.org/stable/modules/generated/sklearn.impute.SimpleImputer)
    train = np.array([[7, 2, 3], [4, np.nan, 6], [10, 5, 9]], dtype=float)
    holes = np.array([[np.nan, 2, 3], [4, np.nan, 6], [10, np.nan, 9]], dtype=float)
    expected = np.array([[7, 2, 3], [4, 3.5, 6], [10, 3.5, 9]], dtype=float)
    got = get_method("mean").fit(frame_of(train)).transform(frame_of(holes)).to_numpy()
    np.testing.assert_array_equal(got, expected)
    np.testing.assert_array_equal(SimpleImputer(strategy="mean").fit(train).transform(holes), got)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_mode_on_numbers_matches_simple_imputer(seed: int) -> None:
    # Whole numbers from a narrow range, so each column has a real mode and ties occur.
    rng = np.random.default_rng(seed)
    values = rng.integers(0, 6, size=(60, 5)).astype(float)
    values[rng.random(values.shape) < 0.3] = np.nan
    values[:, 4] = [1.0, 2.0, np.nan] * 20  # an exact tie between 1 and 2
    # reference library: sklearn.impute.SimpleImputer(strategy="most_frequent"); its
    # documentation: on a tie "only the smallest is returned"
    expected = SimpleImputer(strategy="most_frequent").fit_transform(values)
    got = get_method("mode").fit_transform(frame_of(values)).to_numpy()
    np.testing.assert_array_equal(got, expected)
    assert (got[2::3, 4] == 1.0).all()


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_mode_on_labels_matches_simple_imputer(seed: int) -> None:
    rng = np.random.default_rng(seed)
    labels = np.array(["ambient", "chilled", "frozen", "deep-frozen"], dtype=object)
    column = rng.choice(labels, size=210, p=[0.2, 0.3, 0.35, 0.15]).astype(object)
    column[rng.random(210) < 0.25] = np.nan
    tied = np.array(["frozen", "chilled", np.nan] * 70, dtype=object)  # tie: smallest wins
    frame = pd.DataFrame(
        {"cargo": pd.Categorical(column), "tied": pd.Categorical(tied)}
    )
    # reference library: sklearn.impute.SimpleImputer(strategy="most_frequent") on the labels
    expected = SimpleImputer(strategy="most_frequent").fit_transform(
        np.column_stack([column, tied])
    )
    out = get_method("mode").fit_transform(frame)
    got = np.column_stack([out["cargo"].astype(object), out["tied"].astype(object)])
    np.testing.assert_array_equal(got, expected)
    assert set(out["tied"][frame["tied"].isna()]) == {"chilled"}


# ---------------------------------------------------------------------- knn vs KNNImputer


@pytest.mark.parametrize("seed", [0, 1])
def test_knn_matches_knn_imputer_on_standardised_data(seed: int) -> None:
    values = numeric_with_holes(seed, n=200, rate=0.25)
    # reference library: sklearn.impute.KNNImputer(n_neighbors=5) on z = (x - mean) / std,
    # with the observed mean and std (ddof=0), then mapped back to the original scale
    mean, std = np.nanmean(values, axis=0), np.nanstd(values, axis=0)
    z = KNNImputer(n_neighbors=5).fit_transform((values - mean) / std)
    expected = z * std + mean
    method = get_method("knn", n_neighbors=5, max_donors=len(values), random_state=0)
    got = method.fit_transform(frame_of(values)).to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-10, atol=1e-12)
    # Without the standardisation the widest column would choose the neighbours, and the
    # fill would differ: the check above can tell the two apart.
    assert not np.allclose(KNNImputer(n_neighbors=5).fit_transform(values), expected)


# -------------------------------------------------------- Bayes-optimal fill of a normal


def conditional_means(
    values: np.ndarray, mean: np.ndarray, cov: np.ndarray
) -> np.ndarray:
    """E[x_mis | x_obs] row by row from the true mean and covariance.

    Textbook formula for the conditional distribution of a multivariate normal
    (Anderson 2003, An Introduction to Multivariate Statistical Analysis, 3rd ed., Thm 2.5.1):
    mu_m + S_mo S_oo^-1 (x_o - mu_o); with nothing observed, the marginal mean mu_m.
    """
    out = values.copy()
    missing = np.isnan(values)
    for pattern in np.unique(missing, axis=0):
        if not pattern.any():
            continue
        rows = (missing == pattern).all(axis=1)
        m, o = pattern, ~pattern
        if o.any():
            gain = np.linalg.solve(cov[np.ix_(o, o)], cov[np.ix_(o, m)]).T
            out[np.ix_(rows, m)] = mean[m] + (values[np.ix_(rows, o)] - mean[o]) @ gain.T
        else:
            out[np.ix_(rows, m)] = mean[m]
    return out


@pytest.mark.parametrize("seed", [0, 1])
def test_chained_linear_reaches_the_conditional_mean_of_a_normal(seed: int) -> None:
    rng = np.random.default_rng(seed)
    mean = np.array([1.0, -2.0, 0.5, 3.0])
    scale = np.array([1.0, 2.0, 0.5, 1.5])
    corr = np.full((4, 4), 0.6)
    np.fill_diagonal(corr, 1.0)
    cov = corr * np.outer(scale, scale)
    truth = rng.multivariate_normal(mean, cov, size=5000)
    hidden = rng.random(truth.shape) < 0.2  # MCAR, 20 % per column
    values = np.where(hidden, np.nan, truth)

    best = conditional_means(values, mean, cov)
    chained = get_method("chained-linear", random_state=0).fit_transform(frame_of(values))
    flat = get_method("mean").fit_transform(frame_of(values))
    chained, flat = chained.to_numpy(), flat.to_numpy()

    best_rmse = rmse(truth[hidden], best[hidden])
    # Bayes-optimal bound from the textbook formula above: no fill beats it by more than
    # sampling noise, and a fill that learned the joint normal gets within a few percent.
    assert rmse(truth[hidden], chained[hidden]) <= 1.05 * best_rmse
    assert rmse(truth[hidden], chained[hidden]) >= 0.97 * best_rmse
    assert rmse(truth[hidden], chained[hidden]) <= 0.9 * rmse(truth[hidden], flat[hidden])
    for j in range(4):  # and column by column, whatever its scale
        h = hidden[:, j]
        assert rmse(truth[h, j], chained[h, j]) <= 1.05 * rmse(truth[h, j], best[h, j])


@pytest.mark.parametrize("seed", [0, 1])
def test_bivariate_normal_nrmse_is_sqrt_one_minus_rho_squared(seed: int) -> None:
    # CHECK_VALUES: textbook; for (X, Y) bivariate normal with correlation rho and MCAR holes
    # in Y only, the best fill E[Y | X] leaves a residual sd of sd(Y) * sqrt(1 - rho^2), so
    # its NRMSE is sqrt(1 - 0.8^2) = 0.6, and the mean fill's NRMSE is about 1.
    rho = 0.8
    rng = np.random.default_rng(seed)
    n = 20000
    x = rng.normal(size=n)
    y = 10.0 + 3.0 * (rho * x + np.sqrt(1 - rho**2) * rng.normal(size=n))
    hidden = rng.random(n) < 0.3
    frame = pd.DataFrame({"x": x, "y": np.where(hidden, np.nan, y)})
    sd = np.std(y[~hidden])  # NRMSE scale: the observed sd (ddof=0), as imputelab.metrics.scores

    chained = get_method("chained-linear", random_state=0).fit_transform(frame, ["y"])
    flat = get_method("mean").fit_transform(frame, ["y"])
    chained_nrmse = rmse(y[hidden], chained["y"].to_numpy()[hidden]) / sd
    flat_nrmse = rmse(y[hidden], flat["y"].to_numpy()[hidden]) / sd
    assert chained_nrmse == pytest.approx(np.sqrt(1 - rho**2), rel=0.05)
    assert flat_nrmse == pytest.approx(1.0, rel=0.05)


# ------------------------------------------------------------------ nonlinear relation


@pytest.mark.parametrize("name", ["chained-forest", "chained-boosted"])
def test_tree_chains_follow_a_nonlinear_relation(name: str) -> None:
    # common practice, no source: a sanity check that tree models capture y = sin(2x),
    # which neither the mean nor a straight line can.
    rng = np.random.default_rng(0)
    n = 1500
    x = rng.uniform(-3.0, 3.0, n)
    y = np.sin(2.0 * x) + rng.normal(0.0, 0.15, n)
    hidden = rng.random(n) < 0.25
    frame = pd.DataFrame({"x": x, "y": np.where(hidden, np.nan, y)})
    filled = get_method(name, random_state=0).fit_transform(frame, ["y"])["y"].to_numpy()
    flat = get_method("mean").fit_transform(frame, ["y"])["y"].to_numpy()
    assert rmse(y[hidden], filled[hidden]) <= 0.4 * rmse(y[hidden], flat[hidden])


# -------------------------------------------------------------------- logistic chain


@pytest.mark.parametrize("seed", [0, 1])
def test_chained_linear_labels_match_logistic_regression(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 3000
    hours = rng.normal(5.0, 2.0, n)
    warm = hours - 5.0 + rng.normal(0.0, 1.0, n) > 0
    label = np.where(warm, "breach", "in-range").astype(object)
    hidden = rng.random(n) < 0.2
    frame = pd.DataFrame(
        {
            "door_open_h": hours,
            "status": pd.Categorical(
                np.where(hidden, None, label), categories=["breach", "in-range"]
            ),
        }
    )
    filled = get_method("chained-linear", random_state=0).fit_transform(frame, ["status"])
    accuracy = np.mean(filled["status"].astype(object).to_numpy()[hidden] == label[hidden])
    # reference library: sklearn.linear_model.LogisticRegression fitted on the complete rows
    # and used to predict the hidden ones
    model = LogisticRegression().fit(hours[~hidden, None], label[~hidden])
    reference = np.mean(model.predict(hours[hidden, None]) == label[hidden])
    assert accuracy == pytest.approx(reference, abs=0.03)
    assert accuracy > 0.75  # well above the 50 % of guessing, so the check has teeth


def test_knn_fills_labels_of_a_column_with_more_labels_than_the_one_hot_keeps():
    # 40 labels, more than the 30 the one-hot design keeps; x determines the label exactly, so
    # the nearest donors (scikit-learn's KNNImputer on the design) all carry the right one.
    rng = np.random.default_rng(0)
    labels = [f"L{i:02d}" for i in range(40)]
    codes = rng.integers(0, 40, 2000)
    x = codes.astype(float) * 10.0
    label = pd.Categorical(np.asarray(labels, dtype=object)[codes], categories=labels)
    frame = pd.DataFrame({"x": x, "label": label})
    holes = rng.random(2000) < 0.1
    masked = frame.copy()
    masked.loc[holes, "label"] = np.nan
    from imputelab.methods import get_method
    method = get_method("knn", random_state=0)
    filled = method.fit_transform(masked, ["label"])
    kept = set(np.asarray(labels, dtype=object)[method.keep_["label"]])
    truth = frame["label"][holes].astype(str)
    frequent = truth.isin(kept)
    got = filled["label"][holes].astype(str)
    # Every hole whose true label is among the kept ones is filled with exactly that label.
    assert frequent.sum() > 100
    assert (got[frequent] == truth[frequent]).all()
