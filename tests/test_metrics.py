"""Tests for imputelab.metrics.scores against reference libraries and published definitions."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import sklearn.metrics
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from imputelab.errors import DataError, OptionError
from imputelab.metrics.scores import (
    METRICS,
    PRIMARY,
    Metric,
    accuracy,
    get_metric,
    get_metric_names,
    macro_f1,
    mae,
    nrmse,
    pfc,
    rmse,
    score_cells,
    total_variation,
    wasserstein,
)

NUMERIC = ["mae", "nrmse", "rmse", "wasserstein"]
CATEGORICAL = ["accuracy", "macro_f1", "pfc", "total_variation"]
SEEDS = [0, 1, 2, 3, 4]


def _numeric_pair(seed: int, n: int = 200) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    true = rng.normal(10.0, 3.0, size=n)
    filled = true + rng.normal(0.5, 2.0, size=n)
    return true, filled


def _label_pair(seed: int, n: int = 300) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    labels = np.array(["dairy", "frozen", "produce", "meat", "pharma"], dtype=object)
    true = rng.choice(labels, size=n, p=[0.4, 0.25, 0.2, 0.1, 0.05])
    # Keep about 60 % of the labels and redraw the rest, so every score is strictly inside
    # its range rather than at a trivial 0 or 1.
    keep = rng.random(n) < 0.6
    filled = np.where(keep, true, rng.choice(labels, size=n))
    return true, filled


# ----------------------------------------------------------------- numeric vs references


@pytest.mark.parametrize("seed", SEEDS)
def test_rmse_matches_sklearn(seed: int) -> None:
    true, filled = _numeric_pair(seed)
    # reference library: sklearn.metrics.mean_squared_error (square root taken here)
    expected = math.sqrt(sklearn.metrics.mean_squared_error(true, filled))
    assert rmse(true, filled) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("seed", SEEDS)
def test_mae_matches_sklearn(seed: int) -> None:
    true, filled = _numeric_pair(seed)
    # reference library: sklearn.metrics.mean_absolute_error
    expected = sklearn.metrics.mean_absolute_error(true, filled)
    assert mae(true, filled) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("seed", SEEDS)
def test_wasserstein_matches_scipy_over_observed_std(seed: int) -> None:
    rng = np.random.default_rng(seed)
    observed = rng.gamma(2.0, 3.0, size=500)
    true = rng.gamma(2.0, 3.0, size=120)
    filled = rng.normal(observed.mean(), 1.0, size=120)
    scale = observed.std(ddof=0)
    # reference library: scipy.stats.wasserstein_distance, divided by the observed std
    expected = scipy.stats.wasserstein_distance(true, filled) / scale
    assert wasserstein(true, filled, scale) == pytest.approx(expected, rel=1e-10)


def test_wasserstein_ignores_order_but_rmse_does_not() -> None:
    true = np.array([1.0, 5.0, 2.0, 8.0])
    shuffled = true[[3, 0, 2, 1]]
    # reference library: scipy.stats.wasserstein_distance (0 for the same multiset)
    assert scipy.stats.wasserstein_distance(true, shuffled) == 0.0
    assert wasserstein(true, shuffled, 1.0) == 0.0
    assert rmse(true, shuffled) > 0.0


@pytest.mark.parametrize("seed", SEEDS)
def test_nrmse_is_rmse_over_observed_std(seed: int) -> None:
    rng = np.random.default_rng(seed)
    observed = rng.normal(0.0, 4.0, size=300)
    true, filled = _numeric_pair(seed)
    scale = observed.std(ddof=0)
    # reference library: sklearn.metrics.root_mean_squared_error, divided by the observed std
    expected = sklearn.metrics.root_mean_squared_error(true, filled) / scale
    assert nrmse(true, filled, scale) == pytest.approx(expected, rel=1e-12)


def test_nrmse_of_mean_fill_under_mcar_is_about_one() -> None:
    # NRMSE = RMSE / std as in Oba et al. 2003 (from memory; they divide by the std of the
    # true values, we by the observed std). Under MCAR observed and hidden cells share one
    # distribution, and the RMSE of a constant fill at the mean is the std, so NRMSE ~ 1.
    rng = np.random.default_rng(2003)
    column = rng.standard_normal(40_000)
    hidden = rng.random(column.shape[0]) < 0.2
    observed = column[~hidden]
    true = column[hidden]
    filled = np.full(true.shape[0], observed.mean())
    score = nrmse(true, filled, observed.std(ddof=0))
    # tolerance: a few standard errors of a std estimate from ~8000 draws (1/sqrt(2n) ~ 0.008)
    assert score == pytest.approx(1.0, abs=0.03)


@pytest.mark.parametrize("scale", [0.0, math.nan, math.inf, -math.inf, None])
def test_scaled_metrics_are_nan_without_a_usable_scale(scale: float | None) -> None:
    true, filled = _numeric_pair(0, n=10)
    assert math.isnan(nrmse(true, filled, scale))
    assert math.isnan(wasserstein(true, filled, scale))
    scores = score_cells("numeric", true, filled, scale)
    assert math.isnan(scores["nrmse"])
    assert math.isnan(scores["wasserstein"])
    # the unscaled metrics do not depend on scale
    assert scores["rmse"] == pytest.approx(rmse(true, filled))


def test_negative_scale_is_rejected() -> None:
    with pytest.raises(OptionError, match="scale must be a standard deviation"):
        nrmse([1.0, 2.0], [1.0, 3.0], -1.0)
    with pytest.raises(OptionError, match="scale must be a standard deviation"):
        score_cells("numeric", [1.0, 2.0], [1.0, 3.0], scale=-0.5)


def test_nan_in_numeric_input_propagates() -> None:
    assert math.isnan(rmse([1.0, 2.0], [1.0, math.nan]))
    assert math.isnan(mae([1.0, 2.0], [1.0, math.nan]))


# ------------------------------------------------------------- categorical vs references


@pytest.mark.parametrize("seed", SEEDS)
def test_accuracy_matches_sklearn(seed: int) -> None:
    true, filled = _label_pair(seed)
    # reference library: sklearn.metrics.accuracy_score
    expected = sklearn.metrics.accuracy_score(true, filled)
    assert accuracy(true, filled) == pytest.approx(expected, abs=1e-15)
    assert pfc(true, filled) == pytest.approx(1.0 - expected, abs=1e-15)


@pytest.mark.parametrize("seed", SEEDS)
def test_macro_f1_matches_sklearn(seed: int) -> None:
    true, filled = _label_pair(seed)
    # reference library: sklearn.metrics.f1_score(average="macro")
    expected = sklearn.metrics.f1_score(true, filled, average="macro", zero_division=0)
    assert macro_f1(true, filled) == pytest.approx(expected, rel=1e-12)


def test_macro_f1_with_labels_missing_from_either_side() -> None:
    # "reefer" is only filled, "ambient" is only hidden: both count in the macro average
    true = np.array(["chilled", "chilled", "frozen", "ambient", "frozen", "chilled"])
    filled = np.array(["chilled", "reefer", "frozen", "chilled", "frozen", "reefer"])
    # reference library: sklearn.metrics.f1_score(average="macro", zero_division=0)
    expected = sklearn.metrics.f1_score(true, filled, average="macro", zero_division=0)
    assert macro_f1(true, filled) == pytest.approx(expected, rel=1e-12)
    # by hand: chilled 2*1/(3+2)=0.4, frozen 1, ambient 0, reefer 0 -> mean 0.35
    assert macro_f1(true, filled) == pytest.approx(0.35, rel=1e-12)


def test_macro_f1_integer_labels_match_sklearn() -> None:
    rng = np.random.default_rng(7)
    true = rng.integers(0, 6, size=200)
    filled = rng.integers(1, 8, size=200)  # 0 never filled, 6 and 7 never hidden
    # reference library: sklearn.metrics.f1_score(average="macro", zero_division=0)
    expected = sklearn.metrics.f1_score(true, filled, average="macro", zero_division=0)
    assert macro_f1(true, filled) == pytest.approx(expected, rel=1e-12)


def test_pfc_of_mode_fill_is_one_minus_modal_frequency() -> None:
    # PFC = share of falsely classified entries, Stekhoven & Bühlmann 2012 (from memory).
    # Filling every hidden cell with the mode is wrong exactly where the truth is not the
    # mode, so the expected PFC is 1 - the mode's frequency among the hidden cells.
    rng = np.random.default_rng(2012)
    true = rng.choice(["pallet", "crate", "drum"], size=1_000, p=[0.55, 0.3, 0.15])
    labels, counts = np.unique(true, return_counts=True)
    mode = labels[np.argmax(counts)]
    filled = np.full(true.shape[0], mode)
    assert mode == "pallet"
    assert pfc(true, filled) == pytest.approx(1.0 - counts.max() / true.shape[0], abs=1e-15)


def test_total_variation_small_case_by_hand() -> None:
    # Total variation of discrete distributions = 1/2 * L1 distance (textbook definition,
    # e.g. Levin, Peres & Wilmer, Markov Chains and Mixing Times, Prop. 4.2; from memory).
    # p_true = (a .5, b .25, c .25), p_filled = (a .25, b .75, c 0)
    # -> 0.5 * (0.25 + 0.5 + 0.25) = 0.5
    true = ["a", "a", "b", "c"]
    filled = ["a", "b", "b", "b"]
    assert total_variation(true, filled) == pytest.approx(0.5, abs=1e-15)


def test_total_variation_extremes() -> None:
    # same multiset in another order -> 0; disjoint label sets -> 1 (same definition as above)
    assert total_variation(["x", "y", "y"], ["y", "x", "y"]) == 0.0
    assert total_variation(["x", "y"], ["z", "w"]) == 1.0


# --------------------------------------------------------------------- input handling


def test_pandas_inputs_give_the_same_scores_as_numpy() -> None:
    true, filled = _label_pair(3, n=80)
    s_true = pd.Series(true, dtype="str")
    s_filled = pd.Series(filled, dtype="str")
    assert score_cells("categorical", s_true, s_filled) == score_cells("categorical", true, filled)
    cat_true = pd.Series(true, dtype="category")
    assert macro_f1(cat_true, s_filled) == pytest.approx(macro_f1(true, filled))

    x_true, x_filled = _numeric_pair(3, n=80)
    nullable = pd.Series(x_true, dtype="Float64")
    assert score_cells("numeric", nullable, pd.Series(x_filled), 2.0) == score_cells(
        "numeric", x_true, x_filled, 2.0
    )


def test_mixed_label_types_are_compared_by_value() -> None:
    # 1 and 1.0 are the same label; "1" is not
    assert accuracy(np.array([1, 2, 3]), np.array([1.0, 2.0, 4.0])) == pytest.approx(2 / 3)
    assert accuracy(np.array([1, 2], dtype=object), np.array(["1", 2], dtype=object)) == 0.5


def test_length_mismatch_is_a_data_error() -> None:
    with pytest.raises(DataError, match="same length, got 3 and 2"):
        rmse([1.0, 2.0, 3.0], [1.0, 2.0])
    with pytest.raises(DataError, match="same length, got 1 and 2"):
        score_cells("categorical", ["a"], ["a", "b"])


def test_non_numeric_input_to_numeric_metric_is_a_data_error() -> None:
    with pytest.raises(DataError, match="numeric metric needs numbers in 'filled'"):
        mae([1.0, 2.0], ["a", "b"])


def test_two_dimensional_input_is_a_data_error() -> None:
    with pytest.raises(DataError, match="must be one-dimensional"):
        rmse(np.zeros((2, 2)), np.zeros((2, 2)))


@pytest.mark.parametrize("kind", ["numeric", "categorical"])
def test_empty_input_gives_all_nan(kind: str) -> None:
    scores = score_cells(kind, np.array([]), np.array([]), scale=1.0)
    assert sorted(scores) == get_metric_names(kind)
    assert all(math.isnan(v) for v in scores.values())
    for name in get_metric_names(kind):
        assert math.isnan(get_metric(name).compute([], [], 1.0))


@pytest.mark.parametrize("seed", SEEDS)
def test_score_cells_agrees_with_single_metrics(seed: int) -> None:
    true, filled = _numeric_pair(seed)
    numeric = score_cells("numeric", true, filled, scale=2.5)
    assert list(numeric) == ["rmse", "mae", "nrmse", "wasserstein"]
    for name, value in numeric.items():
        assert value == pytest.approx(get_metric(name).compute(true, filled, 2.5), rel=1e-12)

    labels_true, labels_filled = _label_pair(seed)
    categorical = score_cells("categorical", labels_true, labels_filled)
    assert list(categorical) == ["accuracy", "pfc", "macro_f1", "total_variation"]
    for name, value in categorical.items():
        expected = get_metric(name).compute(labels_true, labels_filled)
        assert value == pytest.approx(expected, rel=1e-12)


def test_score_cells_rejects_unknown_kind() -> None:
    with pytest.raises(OptionError, match="unknown metric kind 'ordinal'"):
        score_cells("ordinal", [1], [1])


# ---------------------------------------------------------------------------- registry


def test_registry_keys_and_kinds() -> None:
    assert set(METRICS) == set(NUMERIC) | set(CATEGORICAL)
    assert get_metric_names() == sorted(NUMERIC + CATEGORICAL)
    assert get_metric_names("numeric") == NUMERIC
    assert get_metric_names("categorical") == CATEGORICAL
    assert all(METRICS[name].kind == "numeric" for name in NUMERIC)
    assert all(METRICS[name].kind == "categorical" for name in CATEGORICAL)
    assert all(m.name == key for key, m in METRICS.items())
    assert PRIMARY == {"numeric": "nrmse", "categorical": "pfc"}
    assert all(METRICS[name].kind == kind for kind, name in PRIMARY.items())


def test_needs_scale_flags() -> None:
    assert {m.name for m in METRICS.values() if m.needs_scale} == {"nrmse", "wasserstein"}


def test_greater_is_better_flags() -> None:
    # error-type scores (sklearn exposes them as "neg_*" scorers) are lower-is-better;
    # accuracy and F1 are higher-is-better
    better_high = {name for name, m in METRICS.items() if m.greater_is_better}
    assert better_high == {"accuracy", "macro_f1"}


@pytest.mark.parametrize("name", sorted(METRICS))
def test_greater_is_better_matches_behaviour(name: str) -> None:
    # a perfect fill must score better than a poor one in the direction the flag claims
    metric = get_metric(name)
    if metric.kind == "numeric":
        true = np.array([1.0, 4.0, 2.0, 8.0, 5.0])
        poor = np.array([3.0, 3.0, 3.0, 3.0, 3.0])
    else:
        true = np.array(["a", "b", "b", "c", "a"])
        poor = np.array(["a", "a", "a", "a", "a"])
    perfect_score = metric.compute(true, true.copy(), 2.0)
    poor_score = metric.compute(true, poor, 2.0)
    if metric.greater_is_better:
        assert perfect_score > poor_score
    else:
        assert perfect_score < poor_score


def test_unknown_metric_name_lists_the_choices() -> None:
    with pytest.raises(
        OptionError,
        match=(
            r"^unknown metric 'foo'; choose one of: accuracy, macro_f1, mae, nrmse, pfc, rmse, "
            r"total_variation, wasserstein$"
        ),
    ):
        get_metric("foo")


def test_get_metric_names_rejects_unknown_kind() -> None:
    with pytest.raises(OptionError, match="unknown metric kind 'text'; choose one of"):
        get_metric_names("text")


def test_metric_is_frozen() -> None:
    metric = get_metric("rmse")
    assert isinstance(metric, Metric)
    with pytest.raises(dataclasses.FrozenInstanceError, match="cannot assign to field"):
        metric.greater_is_better = True  # type: ignore[misc]


# ------------------------------------------------------------------- property tests

_finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)


@st.composite
def _float_pairs(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray]:
    n = draw(st.integers(min_value=1, max_value=40))
    true = draw(hnp.arrays(np.float64, n, elements=_finite))
    filled = draw(hnp.arrays(np.float64, n, elements=_finite))
    return true, filled


@st.composite
def _label_pairs(draw: st.DrawFn) -> tuple[list, list]:
    n = draw(st.integers(min_value=1, max_value=40))
    alphabet = st.sampled_from(["a", "b", "c", "d"]) | st.integers(min_value=0, max_value=3)
    true = draw(st.lists(alphabet, min_size=n, max_size=n))
    filled = draw(st.lists(alphabet, min_size=n, max_size=n))
    return true, filled


@given(_float_pairs())
def test_property_rmse_at_least_mae_at_least_zero(pair: tuple[np.ndarray, np.ndarray]) -> None:
    # RMSE >= MAE is the power-mean (Jensen) inequality; the slack covers rounding and the
    # underflow of squares of tiny differences
    true, filled = pair
    r, a = rmse(true, filled), mae(true, filled)
    assert a >= 0.0
    assert r >= a * (1.0 - 1e-12) - 1e-150


@given(_label_pairs())
def test_property_categorical_ranges(pair: tuple[list, list]) -> None:
    true, filled = pair
    t = np.array(true, dtype=object)
    f = np.array(filled, dtype=object)
    tv = total_variation(t, f)
    assert 0.0 <= tv <= 1.0
    assert accuracy(t, f) + pfc(t, f) == pytest.approx(1.0, abs=1e-12)
    assert 0.0 <= macro_f1(t, f) <= 1.0


@settings(deadline=None)
@given(_label_pairs())
def test_property_macro_f1_matches_sklearn(pair: tuple[list, list]) -> None:
    # reference library: sklearn.metrics.f1_score(average="macro", zero_division=0);
    # labels are strings so sklearn sees one label type
    true = [str(v) for v in pair[0]]
    filled = [str(v) for v in pair[1]]
    expected = sklearn.metrics.f1_score(true, filled, average="macro", zero_division=0)
    assert macro_f1(true, filled) == pytest.approx(expected, rel=1e-12, abs=1e-15)
