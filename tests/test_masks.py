"""Tests of imputelab.masks: the shared contract, then each mechanism's signature.

Statistical checks use fixed seeds, so they are deterministic; their tolerances are set
several standard errors wide so an honest implementation passes with any seed.
"""

from __future__ import annotations

import math
import time

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.special import expit
from scipy.stats import chi2_contingency, chisquare
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score

from imputelab.errors import DataError, OptionError
from imputelab.masks import MASKS, Mask, get_mask, get_mask_names, hidden_count
from imputelab.masks.base import calibrate_intercept, weighted_choice

NAMES = get_mask_names()
# Masks that hide the documented count per column (the pattern mask hides whole row
# patterns taken from the file instead; tests/test_masks_pattern.py covers it).
PER_COLUMN = [n for n in NAMES if n != "pattern"]


def expected_count(n_observed: int, rate: float) -> int:
    """The documented count rule, written out independently of the implementation.

    Project rule (see Mask.sample), no external source: round(rate * n), keeping at
    least max(2, ceil(n / 10)) cells observed; columns with fewer than 4 observed get 0.
    """
    if n_observed < 4:
        return 0
    return min(round(rate * n_observed), n_observed - max(2, math.ceil(n_observed / 10)))


def trip_frame(n: int = 600, seed: int = 7) -> pd.DataFrame:
    """A small refrigerated-freight trip log with every column kind and existing holes."""
    rng = np.random.default_rng(seed)
    temp = rng.normal(3.0, 1.5, n)
    temp[rng.random(n) < 0.15] = np.nan
    door = pd.Categorical(
        rng.choice(["shut", "open", "ajar"], n), categories=["shut", "open", "ajar"]
    )
    door[rng.random(n) < 0.1] = np.nan
    route = pd.array(rng.choice(["north", "coast", "inland"], n), dtype="str")
    route[rng.random(n) < 0.2] = pd.NA
    sparse = np.full(n, np.nan)
    sparse[:3] = [1.0, 2.0, 3.0]
    return pd.DataFrame(
        {
            "temp_c": temp,
            "load_kg": rng.lognormal(8.0, 0.4, n),
            "door": door,
            "carrier": pd.Categorical(rng.choice(["A", "B", "C", "D"], n)),
            "route": route,
            "sparse": sparse,
            "empty": np.full(n, np.nan),
        }
    )


def auc_of(hidden: np.ndarray, values: np.ndarray) -> float:
    # Reference library: sklearn.metrics.roc_auc_score.
    return float(roc_auc_score(hidden.astype(int), values))


# --------------------------------------------------------------------------- registry


def test_registry_names_and_classes() -> None:
    assert NAMES == ["mar", "mcar", "mnar", "pattern"]
    for name in NAMES:
        assert MASKS[name].name == name
        assert isinstance(get_mask(name), Mask)


def test_unknown_mask_message() -> None:
    choices = "mar, mcar, mnar, pattern"
    with pytest.raises(OptionError, match=rf"^unknown mask 'x'; choose from: {choices}$"):
        get_mask("x")


def test_get_mask_passes_params() -> None:
    mask = get_mask("mar", strength=3.0, n_drivers=1)
    assert mask.get_params() == {"strength": 3.0, "n_drivers": 1}
    assert repr(get_mask("mnar", strength=0.5)) == "MNARMask(strength=0.5)"


def test_get_mask_rejects_unknown_param() -> None:
    with pytest.raises(OptionError, match=r"mask 'mcar' does not take parameter\(s\) strength"):
        get_mask("mcar", strength=1.0)


@pytest.mark.parametrize(
    ("name", "params", "pattern"),
    [
        ("mar", {"n_drivers": 0}, r"`n_drivers` must be a whole number of at least 1"),
        ("mar", {"n_drivers": 1.5}, r"`n_drivers` must be a whole number of at least 1"),
        ("mar", {"strength": float("nan")}, r"strength must be a finite number"),
        ("mnar", {"strength": float("inf")}, r"strength must be a finite number"),
    ],
)
def test_bad_params_rejected_at_sample(name: str, params: dict, pattern: str) -> None:
    X = trip_frame(50)
    with pytest.raises(OptionError, match=pattern):
        get_mask(name, **params).sample(X, ["temp_c"], 0.2, np.random.default_rng(0))


# --------------------------------------------------------------------------- contract


@pytest.mark.parametrize("name", NAMES)
def test_shape_dtype_and_only_observed(name: str) -> None:
    X = trip_frame()
    cols = list(X.columns)
    hidden = get_mask(name).sample(X, cols, 0.3, np.random.default_rng(1))
    assert hidden.shape == (len(X), len(cols))
    assert hidden.dtype == bool
    assert not (hidden & X[cols].isna().to_numpy()).any()


@pytest.mark.parametrize("name", PER_COLUMN)
@pytest.mark.parametrize("rate", [0.05, 0.2, 0.5, 0.95])
def test_count_per_column(name: str, rate: float) -> None:
    X = trip_frame()
    cols = list(X.columns)
    hidden = get_mask(name).sample(X, cols, rate, np.random.default_rng(2))
    for j, col in enumerate(cols):
        n_obs = int(X[col].notna().sum())
        assert hidden[:, j].sum() == expected_count(n_obs, rate), col
    assert hidden[:, cols.index("sparse")].sum() == 0  # 3 observed cells: below the floor
    assert hidden[:, cols.index("empty")].sum() == 0


@pytest.mark.parametrize(
    ("n_observed", "rate", "k"),
    [
        (100, 0.95, 90),  # round gives 95; 10 must stay observed
        (10, 0.9, 8),  # round gives 9; max(2, 1) = 2 must stay observed
        (4, 0.5, 2),  # smallest column that gets any
        (3, 0.5, 0),  # below the floor
        (1000, 0.2, 200),
        (5, 0.5, 2),  # Python's round(2.5) is 2 (halves to even)
    ],
)
def test_hidden_count_cap(n_observed: int, rate: float, k: int) -> None:
    # Hand-worked values of the documented rule (project rule, no external source).
    assert hidden_count(n_observed, rate) == k
    assert expected_count(n_observed, rate) == k


@pytest.mark.parametrize("name", NAMES)
def test_deterministic_and_seed_sensitive(name: str) -> None:
    X = trip_frame()
    cols = ["temp_c", "load_kg", "door", "route"]
    mask = get_mask(name)
    first = mask.sample(X, cols, 0.25, np.random.default_rng(11))
    again = mask.sample(X, cols, 0.25, np.random.default_rng(11))
    other = mask.sample(X, cols, 0.25, np.random.default_rng(12))
    np.testing.assert_array_equal(first, again)
    assert not np.array_equal(first, other)


@pytest.mark.parametrize("name", NAMES)
def test_does_not_mutate_frame_or_mask(name: str) -> None:
    X = trip_frame()
    before = X.copy(deep=True)
    mask = get_mask(name)
    params_before = dict(vars(mask))
    mask.sample(X, list(X.columns), 0.3, np.random.default_rng(3), info={})
    pd.testing.assert_frame_equal(X, before)
    assert vars(mask) == params_before


@pytest.mark.parametrize("name", NAMES)
def test_info_names_drivers(name: str) -> None:
    X = trip_frame()
    cols = ["temp_c", "door", "empty"]
    info: dict[str, list[str]] = {}
    get_mask(name).sample(X, cols, 0.3, np.random.default_rng(4), info=info)
    assert set(info) == set(cols)
    assert info["empty"] == []  # nothing hidden, so nothing drove it
    for col in ("temp_c", "door"):
        drivers = info[col]
        if name in ("mcar", "pattern"):
            assert drivers == []
        elif name == "mnar":
            assert drivers == [col]
        else:
            assert 1 <= len(drivers) <= 2
            assert col not in drivers
            assert set(drivers) <= set(X.columns)


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("rate", [0.0, 1.0, -0.2, 1.5, float("nan"), True, "0.2"])
def test_rate_validation(name: str, rate: object) -> None:
    X = trip_frame(50)
    with pytest.raises(OptionError, match=r"`rate` must be a number strictly between 0 and 1"):
        get_mask(name).sample(X, ["temp_c"], rate, np.random.default_rng(0))  # type: ignore[arg-type]


@pytest.mark.parametrize("name", NAMES)
def test_unknown_column(name: str) -> None:
    X = trip_frame(50)
    with pytest.raises(DataError, match=r"no such column\(s\) in the table: 'humidity'"):
        get_mask(name).sample(X, ["temp_c", "humidity"], 0.2, np.random.default_rng(0))


@pytest.mark.parametrize("name", NAMES)
def test_column_listed_twice(name: str) -> None:
    X = trip_frame(50)
    with pytest.raises(DataError, match=r"listed more than once: temp_c"):
        get_mask(name).sample(X, ["temp_c", "temp_c"], 0.2, np.random.default_rng(0))


@pytest.mark.parametrize("name", PER_COLUMN)
@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(min_value=0, max_value=60),
    missing=st.floats(min_value=0.0, max_value=0.9),
    rate=st.floats(min_value=0.01, max_value=0.99),
    seed=st.integers(min_value=0, max_value=2**32 - 1),
)
def test_contract_property(name: str, n: int, missing: float, rate: float, seed: int) -> None:
    # Any frame size, hole fraction and rate: counts follow the rule, only observed cells.
    rng = np.random.default_rng(seed)
    num = rng.standard_normal(n)
    num[rng.random(n) < missing] = np.nan
    cat = pd.Categorical(rng.choice(["a", "b"], n), categories=["a", "b"])
    cat[rng.random(n) < missing] = np.nan
    X = pd.DataFrame({"num": num, "cat": cat, "other": rng.standard_normal(n)})
    hidden = get_mask(name).sample(X, ["num", "cat"], rate, rng)
    observed = X[["num", "cat"]].notna().to_numpy()
    assert not (hidden & ~observed).any()
    for j in range(2):
        assert hidden[:, j].sum() == expected_count(int(observed[:, j].sum()), rate)


@pytest.mark.parametrize("name", NAMES)
def test_fast_enough(name: str) -> None:
    # Budget: 20,000 rows x 12 columns well under 50 ms; asserted loosely (0.25 s, best of
    # three) so slow CI machines do not flake. Common practice, no source.
    rng = np.random.default_rng(0)
    n = 20_000
    data: dict[str, object] = {f"x{i}": rng.standard_normal(n) for i in range(9)}
    for i in range(3):
        data[f"c{i}"] = pd.Categorical(rng.choice(list("abcdef"), n))
    X = pd.DataFrame(data)
    X.loc[rng.random(n) < 0.1, "x0"] = np.nan
    mask = get_mask(name)
    best = math.inf
    for seed in range(3):
        start = time.perf_counter()
        mask.sample(X, list(X.columns), 0.2, np.random.default_rng(seed))
        best = min(best, time.perf_counter() - start)
    assert best < 0.25


# --------------------------------------------------------------------------- helpers


@pytest.mark.parametrize("strength", [0.5, 2.0, 8.0, 50.0])
@pytest.mark.parametrize("rate", [0.02, 0.2, 0.5, 0.9])
def test_calibrated_intercept_hits_rate(strength: float, rate: float) -> None:
    # Reference: scipy.special.expit is the logistic sigmoid; the mean over the cells must
    # equal the rate (the definition of the calibration).
    score = strength * np.random.default_rng(5).standard_normal(5_000)
    a = calibrate_intercept(score, rate)
    assert np.mean(expit(a + score)) == pytest.approx(rate, abs=1e-6)


def test_weighted_choice_single_draw_proportional() -> None:
    # Efraimidis & Spirakis (2006), Information Processing Letters 97(5): with k = 1 the
    # largest key u**(1/w) belongs to item i with probability w_i / sum(w).
    # Reference test: scipy.stats.chisquare goodness of fit.
    w = np.array([1.0, 2.0, 3.0, 4.0])
    rng = np.random.default_rng(6)
    reps = 20_000
    counts = np.bincount(
        [weighted_choice(np.log(w), 1, rng)[0] for _ in range(reps)], minlength=w.size
    )
    assert chisquare(counts, reps * w / w.sum()).pvalue > 1e-3


def test_weighted_choice_pairs_match_successive_sampling() -> None:
    # Efraimidis & Spirakis (2006) show the key method equals drawing items one at a time
    # with probability proportional to weight among those left; so for k = 2,
    # P({i, j}) = w_i/W * w_j/(W - w_i) + w_j/W * w_i/(W - w_j) (from memory).
    w = np.array([1.0, 2.0, 3.0, 4.0])
    total = w.sum()
    pairs = [(i, j) for i in range(4) for j in range(i + 1, 4)]
    expected = np.array(
        [
            w[i] / total * w[j] / (total - w[i]) + w[j] / total * w[i] / (total - w[j])
            for i, j in pairs
        ]
    )
    assert expected.sum() == pytest.approx(1.0)
    rng = np.random.default_rng(8)
    reps = 20_000
    index = {pair: n for n, pair in enumerate(pairs)}
    counts = np.zeros(len(pairs))
    for _ in range(reps):
        i, j = sorted(weighted_choice(np.log(w), 2, rng).tolist())
        counts[index[(i, j)]] += 1
    assert chisquare(counts, reps * expected).pvalue > 1e-3


def test_weighted_choice_survives_tiny_weights() -> None:
    # Weights far below the float range (log-weight -5000) must still give k distinct
    # indices, the heavy ones first.
    log_w = np.full(100, -5000.0)
    log_w[:3] = 0.0
    chosen = weighted_choice(log_w, 5, np.random.default_rng(9))
    assert len(set(chosen.tolist())) == 5
    assert {0, 1, 2} <= set(chosen.tolist())


# --------------------------------------------------------------------------- MCAR


def test_mcar_rate_and_unpredictable() -> None:
    rng = np.random.default_rng(10)
    n, m, rate = 10_000, 10, 0.2
    values = rng.standard_normal((n, m))
    values[rng.random((n, m)) < 0.05] = np.nan  # existing holes, so the rate is non-trivial
    X = pd.DataFrame(values, columns=[f"v{j}" for j in range(m)])
    hidden = get_mask("mcar").sample(X, list(X.columns), rate, rng)
    observed = ~np.isnan(values)
    # Target: within 1 percentage point of the rate over ~95,000 observed cells.
    assert abs(hidden.sum() / observed.sum() - rate) < 0.01
    for j in range(m):
        keep = observed[:, j]
        # Null SD of the AUC is sqrt((n0 + n1 + 1) / (12 n0 n1)) ~ 0.007 here (Mann-Whitney
        # null variance, from memory), so +-0.03 is about four standard errors.
        assert abs(auc_of(hidden[keep, j], values[keep, j]) - 0.5) < 0.03


# --------------------------------------------------------------------------- MAR


def test_mar_driven_by_other_columns_not_own_value() -> None:
    rng = np.random.default_rng(20)
    n = 10_000
    X = pd.DataFrame(
        {"x1": rng.standard_normal(n), "x2": rng.standard_normal(n), "y": rng.standard_normal(n)}
    )
    info: dict[str, list[str]] = {}
    hidden = get_mask("mar").sample(X, ["y"], 0.3, rng, info=info)[:, 0]
    # X holds only y and the two others, so with n_drivers=2 both must be drivers.
    assert sorted(info["y"]) == ["x1", "x2"]
    drivers = X[["x1", "x2"]].to_numpy()
    # Reference library: scikit-learn's LogisticRegression and roc_auc_score.
    model = LogisticRegression().fit(drivers, hidden)
    assert auc_of(hidden, model.predict_proba(drivers)[:, 1]) > 0.75
    best_driver = max(abs(auc_of(hidden, drivers[:, d]) - 0.5) for d in range(2))
    assert best_driver > 0.15
    # y is independent of the drivers, so its own value must tell nothing (+-0.03 is about
    # four null standard errors, see the MCAR test).
    assert abs(auc_of(hidden, X["y"].to_numpy()) - 0.5) < 0.03


def test_mar_categorical_driver() -> None:
    rng = np.random.default_rng(21)
    n = 10_000
    X = pd.DataFrame(
        {
            "carrier": pd.Categorical(rng.choice(["A", "B", "C", "D"], n)),
            "y": rng.standard_normal(n),
        }
    )
    info: dict[str, list[str]] = {}
    hidden = get_mask("mar", n_drivers=1).sample(X, ["y"], 0.3, rng, info=info)[:, 0]
    assert info["y"] == ["carrier"]
    # Reference library: scipy.stats.chi2_contingency, test of independence.
    table = pd.crosstab(X["carrier"], hidden)
    assert chi2_contingency(table).pvalue < 1e-6
    assert abs(auc_of(hidden, X["y"].to_numpy()) - 0.5) < 0.03


def test_mar_without_other_columns_is_uniform() -> None:
    rng = np.random.default_rng(22)
    y = rng.standard_normal(5_000)
    info: dict[str, list[str]] = {}
    hidden = get_mask("mar").sample(pd.DataFrame({"y": y}), ["y"], 0.3, rng, info=info)[:, 0]
    assert info["y"] == []
    assert hidden.sum() == 1_500
    assert abs(auc_of(hidden, y) - 0.5) < 0.04  # ~4 null SEs at n = 5,000 (see MCAR test)


# --------------------------------------------------------------------------- MNAR


def test_mnar_numeric_high_values_go_missing() -> None:
    rng = np.random.default_rng(30)
    y = rng.standard_normal(10_000)
    X = pd.DataFrame({"y": y, "x": rng.standard_normal(10_000)})
    hidden = get_mask("mnar").sample(X, ["y"], 0.3, rng)[:, 0]
    assert auc_of(hidden, y) > 0.7
    # The sign of strength sets the direction; 0 removes the dependence.
    low = get_mask("mnar", strength=-2.0).sample(X, ["y"], 0.3, rng)[:, 0]
    assert auc_of(low, y) < 0.3
    flat = get_mask("mnar", strength=0.0).sample(X, ["y"], 0.3, rng)[:, 0]
    assert abs(auc_of(flat, y) - 0.5) < 0.03


def test_mnar_categorical_rates_differ_by_category() -> None:
    rng = np.random.default_rng(31)
    n = 10_000
    door = pd.Categorical(rng.choice(["shut", "open", "ajar", "jammed", "sealed"], n))
    X = pd.DataFrame({"door": door})
    hidden = get_mask("mnar").sample(X, ["door"], 0.3, rng)[:, 0]
    # Reference library: scipy.stats.chi2_contingency, test of independence.
    assert chi2_contingency(pd.crosstab(X["door"], hidden)).pvalue < 1e-6


def test_a_label_driver_with_every_cell_missing_gives_no_effect() -> None:
    # Found by hypothesis (test_contract_property[mar]): a categorical column with no
    # observed label used to crash the effect lookup.
    from imputelab.masks.base import standardized_effect

    empty = pd.Series(pd.Categorical([None] * 5, categories=["a", "b"]))
    np.testing.assert_array_equal(standardized_effect(empty, np.random.default_rng(0)),
                                  np.zeros(5))
