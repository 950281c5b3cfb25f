"""The contract every registered fill method keeps, run over the whole registry.

One test body per property, parametrised over :func:`imputelab.methods.get_method_names`,
in the manner of scikit-learn's common estimator checks: a method added to the registry is
checked here without anyone writing a new test. Data are seeded, so every run is the same.
"""

from __future__ import annotations

import copy
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.base import clone
from sklearn.exceptions import NotFittedError
from sklearn.utils.validation import check_is_fitted
from threadpoolctl import threadpool_limits

from imputelab.errors import DataError
from imputelab.methods import FillMethod, get_method, get_method_names

NAMES = get_method_names()
NUMERIC_COLUMNS = ["temp_c", "load_kg", "transit_h"]
LABEL_COLUMNS = ["door", "carrier"]
SEEDED = [n for n in NAMES if "random_state" in get_method(n).get_params()]
# Methods whose output actually depends on the seed with their default settings (knn only
# draws donors when the table is larger than ``max_donors``, see test_random_state_is_used).
SEED_SENSITIVE = ["chained-forest", "chained-boosted"]
# Lighter settings for the slow learners: the contract is about behaviour, not accuracy
# (the reference tests use the defaults), and two sweeps still exercise the chain replay.
# Settings a method does not have are skipped, so a renamed tree parameter costs speed, not a
# broken collection.
LIGHT = {
    "chained-linear": {"n_sweeps": 2},
    "chained-forest": {"n_sweeps": 2, "n_trees": 15},
    "chained-boosted": {"max_trees": 60},
    # given weights: the contract runs without the selection fits (tests/test_blend.py
    # covers those)
    "blend": {"weights": {"chained-linear": 0.5, "chained-forest": 0.25,
                          "chained-boosted": 0.25}},
}

# ------------------------------------------------------------------------------- helpers


def trip_frame(n: int = 300, seed: int = 0, hole_rate: float = 0.2) -> pd.DataFrame:
    """A refrigerated-freight trip log in working-frame form, with random holes.

    Columns: three correlated numbers, two label columns, and two more columns (one of
    each type) that the tests leave out of the targets, so their holes must survive.
    The index is neither 0..n-1 nor sorted, so positional and label indexing cannot be
    confused without a test noticing.
    """
    rng = np.random.default_rng(seed)
    load = rng.lognormal(8.0, 0.4, n)
    transit = rng.gamma(3.0, 4.0, n)
    temp = 2.0 + 0.1 * transit + rng.normal(0.0, 1.0, n)
    door = rng.choice(["shut", "open", "ajar"], n, p=[0.6, 0.3, 0.1])
    carrier = np.where((load > np.median(load)) ^ (rng.random(n) < 0.15), "north", "coast")
    frame = pd.DataFrame(
        {
            "temp_c": temp,
            "load_kg": load,
            "transit_h": transit,
            "door": pd.Categorical(door, categories=["ajar", "open", "shut"]),
            "carrier": pd.Categorical(carrier, categories=["coast", "north"]),
            "stops": rng.poisson(3.0, n).astype(float),
            "reefer": pd.Categorical(rng.choice(["r1", "r2", "r3"], n)),
        },
        index=pd.Index(rng.permutation(n) + 1000, name="trip"),
    )
    for name in frame.columns:
        holes = rng.random(n) < hole_rate
        frame.loc[frame.index[holes], name] = np.nan
    return frame


def make(name: str, **params) -> FillMethod:
    """A method with a fixed seed where it takes one."""
    accepted = get_method(name).get_params()
    light = {k: v for k, v in LIGHT.get(name, {}).items() if k in accepted}
    params = {**light, **params}
    if name in SEEDED:
        params.setdefault("random_state", 0)
    return get_method(name, **params)


def targets_for(name: str) -> list[str]:
    """Every numeric column and, when the method fills labels, both label columns."""
    if make(name).unsupported_reason("categorical") is None:
        return NUMERIC_COLUMNS + LABEL_COLUMNS
    return list(NUMERIC_COLUMNS)


def quiet_fit_transform(method: FillMethod, frame: pd.DataFrame, targets) -> pd.DataFrame:
    # Tiny degenerate frames make the underlying learners warn; the warnings are not
    # what these tests are about.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return method.fit_transform(frame, targets)


def assert_observed_kept(before: pd.DataFrame, after: pd.DataFrame) -> None:
    """Every cell observed in ``before`` is exactly equal in ``after``."""
    for name in before.columns:
        seen = before[name].notna().to_numpy()
        if isinstance(before[name].dtype, pd.CategoricalDtype):
            old = before[name].astype(object).to_numpy()[seen]
            new = after[name].astype(object).to_numpy()[seen]
        else:
            old = before[name].to_numpy(float)[seen]
            new = after[name].to_numpy(float)[seen]
        np.testing.assert_array_equal(new, old, err_msg=f"observed cells of {name} changed")


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    # The frames here are tiny: spreading a 300-row solve over BLAS threads makes it several
    # times slower, not faster.
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="module")
def train() -> pd.DataFrame:
    return trip_frame(seed=0)


@pytest.fixture(scope="module")
def fresh() -> pd.DataFrame:
    """New rows: same columns and categories, other values and holes."""
    return trip_frame(n=120, seed=1, hole_rate=0.3)


@pytest.fixture(scope="module")
def filled(train) -> dict[str, pd.DataFrame]:
    """fit_transform of every method on the training frame, computed once."""
    return {name: make(name).fit_transform(train, targets_for(name)) for name in NAMES}


# ------------------------------------------------------------------------ registry shape


@pytest.mark.parametrize("name", NAMES)
def test_class_attributes(name: str) -> None:
    cls = type(make(name))
    assert cls.name == name
    assert "numeric" in cls.kinds
    assert isinstance(cls.simplicity, int)
    assert cls.source.strip(), "every method names where it is published"


def test_names_are_ordered_simplest_first() -> None:
    ranks = [type(make(n)).simplicity for n in NAMES]
    assert ranks == sorted(ranks)


# -------------------------------------------------------------------- the fill itself


@pytest.mark.parametrize("name", NAMES)
def test_fills_every_target_hole(name: str, train, filled) -> None:
    out = filled[name]
    targets = targets_for(name)
    assert train[targets].isna().to_numpy().sum() > 100, "the fixture must have holes to fill"
    assert not out[targets].isna().to_numpy().any()


@pytest.mark.parametrize("name", NAMES)
def test_observed_cells_unchanged(name: str, train, filled) -> None:
    assert_observed_kept(train, filled[name])


@pytest.mark.parametrize("name", NAMES)
def test_non_target_columns_unchanged(name: str, train, filled) -> None:
    others = [c for c in train.columns if c not in targets_for(name)]
    assert "stops" in others and "reefer" in others
    assert train[others].isna().to_numpy().any(), "non-target columns must have holes"
    pd.testing.assert_frame_equal(filled[name][others], train[others], check_exact=True)


@pytest.mark.parametrize("name", NAMES)
def test_input_not_mutated(name: str, train) -> None:
    before = copy.deepcopy(train)
    method = make(name)
    method.fit(train, targets_for(name))
    method.transform(train)
    make(name).fit_transform(train, targets_for(name))
    pd.testing.assert_frame_equal(train, before, check_exact=True)


@pytest.mark.parametrize("name", NAMES)
def test_dtypes_index_and_columns_kept(name: str, train, filled) -> None:
    out = filled[name]
    assert list(out.columns) == list(train.columns)
    pd.testing.assert_index_equal(out.index, train.index, exact=True)
    for column in NUMERIC_COLUMNS + ["stops"]:
        assert out[column].dtype == np.float64
    for column in LABEL_COLUMNS + ["reefer"]:
        dtype = out[column].dtype
        assert isinstance(dtype, pd.CategoricalDtype)
        assert not dtype.ordered
        expected = list(train[column].cat.categories)
        if name == "constant" and column in targets_for(name):
            # The constant fill's documented behaviour: label holes get a new category,
            # appended after the existing ones.
            expected = expected + ["missing"]
        assert list(dtype.categories) == expected


def test_constant_fills_labels_with_its_new_category_and_numbers_with_zero(
    train, filled
) -> None:
    out = filled["constant"]
    for column in LABEL_COLUMNS:
        holes = train[column].isna().to_numpy()
        assert set(out[column][holes]) == {"missing"}
    for column in NUMERIC_COLUMNS:
        holes = train[column].isna().to_numpy()
        assert (out[column][holes] == 0.0).all()
    custom = make("constant", missing_label="unrecorded").fit_transform(train, ["door"])
    assert list(custom["door"].cat.categories) == ["ajar", "open", "shut", "unrecorded"]


@pytest.mark.parametrize("name", [n for n in NAMES if "door" in targets_for(n) and n != "constant"])
def test_label_fills_are_known_labels(name: str, train, filled) -> None:
    # A fill never invents a label, except constant's documented one.
    for column in LABEL_COLUMNS:
        assert set(filled[name][column].dropna()) <= set(train[column].cat.categories)


# ----------------------------------------------------------------- estimator protocol


@pytest.mark.parametrize("name", NAMES)
def test_clone_is_unfitted_and_equivalent(name: str, train, filled) -> None:
    method = make(name).fit(train, targets_for(name))
    twin = clone(method)
    assert type(twin) is type(method)
    assert twin.get_params() == method.get_params()
    with pytest.raises(NotFittedError, match="not fitted yet"):
        check_is_fitted(twin, "targets_")
    assert not hasattr(twin, "targets_")
    out = twin.fit_transform(train, targets_for(name))
    pd.testing.assert_frame_equal(out, filled[name], check_exact=True)


@pytest.mark.parametrize("name", NAMES)
def test_transform_before_fit_raises(name: str, train) -> None:
    with pytest.raises(NotFittedError, match="not fitted yet"):
        make(name).transform(train)


@pytest.mark.parametrize("name", NAMES)
def test_same_random_state_same_output(name: str, train, filled) -> None:
    again = make(name).fit_transform(train, targets_for(name))
    pd.testing.assert_frame_equal(again, filled[name], check_exact=True)


@pytest.mark.parametrize("name", SEEDED)
def test_output_is_a_function_of_random_state(name: str, train) -> None:
    targets = targets_for(name)
    outs = {
        seed: make(name, random_state=seed).fit_transform(train, targets) for seed in (3, 7)
    }
    pd.testing.assert_frame_equal(
        make(name, random_state=3).fit_transform(train, targets), outs[3], check_exact=True
    )
    # A RandomState object seeded alike gives the same fill as the integer seed.
    pd.testing.assert_frame_equal(
        make(name, random_state=np.random.RandomState(7)).fit_transform(train, targets),
        outs[7],
        check_exact=True,
    )


@pytest.mark.parametrize(
    ("name", "params"),
    [(n, {}) for n in SEED_SENSITIVE] + [("knn", {"max_donors": 100})],
)
def test_random_state_is_used(name: str, params: dict, train) -> None:
    # If the seed were never passed down, every seed would give the same fill.
    targets = targets_for(name)
    first = make(name, random_state=0, **params).fit_transform(train, targets)
    second = make(name, random_state=1, **params).fit_transform(train, targets)
    assert not first[NUMERIC_COLUMNS].equals(second[NUMERIC_COLUMNS])


@pytest.mark.parametrize("name", NAMES)
def test_fit_transform_equals_fit_then_transform(name: str, train, filled) -> None:
    # For the chained methods this is a real property: fit_transform returns the chain's
    # own last state, while transform replays every stored model from the start.
    method = make(name).fit(train, targets_for(name))
    pd.testing.assert_frame_equal(method.transform(train), filled[name], check_exact=True)


@pytest.mark.parametrize("name", NAMES)
def test_transform_new_rows(name: str, train, fresh) -> None:
    targets = targets_for(name)
    method = make(name).fit(train, targets)
    out = method.transform(fresh)
    assert not out[targets].isna().to_numpy().any()
    assert_observed_kept(fresh, out)
    others = [c for c in fresh.columns if c not in targets]
    pd.testing.assert_frame_equal(out[others], fresh[others], check_exact=True)
    pd.testing.assert_index_equal(out.index, fresh.index, exact=True)
    # Transform depends only on the fitted state, not on the order of calls.
    pd.testing.assert_frame_equal(method.transform(fresh), out, check_exact=True)


@pytest.mark.parametrize("name", NAMES)
def test_column_complete_in_training_is_filled_later(name: str, train, fresh) -> None:
    targets = targets_for(name)
    complete = train.copy()
    rng = np.random.default_rng(5)
    for column in ["load_kg", "carrier"]:
        donor = complete[column].dropna().to_numpy()
        drawn = pd.Series(donor[rng.integers(0, len(donor), len(complete))], index=complete.index)
        complete[column] = drawn.astype(complete[column].dtype)
        assert not complete[column].isna().any()
    method = make(name).fit(complete, targets)
    out = method.transform(fresh)
    for column in ["load_kg", "carrier"]:
        if column in targets:
            assert fresh[column].isna().any()
            assert not out[column].isna().any(), f"{column} left with holes"


@pytest.mark.parametrize("name", NAMES)
def test_unknown_target_raises(name: str, train) -> None:
    with pytest.raises(DataError, match="columns not in the table: no_such_column"):
        make(name).fit(train, ["temp_c", "no_such_column"])


@pytest.mark.parametrize("name", NAMES)
def test_label_target_refused_unless_supported(name: str, train) -> None:
    method = make(name)
    if method.unsupported_reason("categorical") is None:
        out = method.fit_transform(train, ["door"])
        assert not out["door"].isna().any()
    else:
        with pytest.raises(DataError, match="column 'door': .* does not fill categorical"):
            method.fit(train, ["door"])


@pytest.mark.parametrize("name", NAMES)
def test_transform_without_a_fitted_column_raises(name: str, train) -> None:
    method = make(name).fit(train, targets_for(name))
    with pytest.raises(DataError, match="columns seen in fit are missing: stops"):
        method.transform(train.drop(columns=["stops"]))


@pytest.mark.parametrize("name", NAMES)
def test_empty_frame_raises(name: str, train) -> None:
    with pytest.raises(DataError, match="the table has no rows"):
        make(name).fit(train.iloc[:0], targets_for(name))


# ------------------------------------------------------------------------ degenerate data


def degenerate_frame(n: int = 60) -> pd.DataFrame:
    """A constant column, a column with a single observed value, and ordinary ones."""
    rng = np.random.default_rng(11)
    frame = pd.DataFrame(
        {
            "flat": np.full(n, 4.0),
            "single": np.full(n, np.nan),
            "temp_c": rng.normal(3.0, 1.5, n),
            "door": pd.Categorical(np.full(n, "shut"), categories=["open", "shut"]),
            "carrier": pd.Categorical(rng.choice(["coast", "north"], n)),
        }
    )
    frame.loc[5, "single"] = 7.5
    for column, start in [("flat", 10), ("temp_c", 20), ("door", 30), ("carrier", 40)]:
        frame.loc[start : start + 5, column] = np.nan
    return frame


@pytest.mark.parametrize("name", NAMES)
def test_constant_and_single_value_columns(name: str) -> None:
    frame = degenerate_frame()
    numeric = ["flat", "single", "temp_c"]
    targets = numeric + (["door", "carrier"] if "door" in targets_for(name) else [])
    out = quiet_fit_transform(make(name), frame, targets)
    assert not out[targets].isna().to_numpy().any()
    assert_observed_kept(frame, out)
    holes = frame["flat"].isna().to_numpy()
    one = frame["single"].isna().to_numpy()
    if name == "constant":
        assert (out["flat"][holes] == 0.0).all()
        assert (out["single"][one] == 0.0).all()
    else:
        # With one distinct observed value there is nothing else any method could learn.
        np.testing.assert_allclose(out["flat"][holes], 4.0, rtol=1e-12)
        np.testing.assert_allclose(out["single"][one], 7.5, rtol=1e-12)
        if "door" in targets:
            assert set(out["door"][frame["door"].isna().to_numpy()]) == {"shut"}


@pytest.mark.parametrize("name", NAMES)
def test_single_row_frame(name: str) -> None:
    full = trip_frame(n=1, seed=3, hole_rate=0.0)
    targets = targets_for(name)
    out = quiet_fit_transform(make(name), full, targets)
    pd.testing.assert_frame_equal(out, full, check_exact=True)
    # With a hole: nothing to learn the column from, but the call must not fail, the
    # observed cells stay, and every column keeps its type.
    holed = full.copy()
    holed.loc[holed.index[0], "temp_c"] = np.nan
    out = quiet_fit_transform(make(name), holed, targets)
    assert out.shape == holed.shape
    assert_observed_kept(holed, out)
    assert out["temp_c"].dtype == np.float64


def all_missing_params() -> list:
    params = []
    for name in NAMES:
        marks = []
        params.append(pytest.param(name, marks=marks, id=name))
    return params


@pytest.mark.parametrize("name", all_missing_params())
@pytest.mark.parametrize("empty", ["temp_c", "reefer"])
def test_column_without_observed_values_does_not_crash(name: str, empty: str, train) -> None:
    # A column with no observed value (a target, or a label feature) gives a method nothing
    # to learn from it; whatever it does with that column, it must fill the others.
    frame = train.copy()
    frame[empty] = (
        np.nan
        if empty == "temp_c"
        else pd.Categorical([None] * len(frame), categories=["r1", "r2", "r3"])
    )
    targets = targets_for(name)
    out = quiet_fit_transform(make(name), frame, targets)
    assert_observed_kept(frame, out)
    others = [t for t in targets if t != empty]
    assert not out[others].isna().to_numpy().any()


# ------------------------------------------------------------------------ property test


@st.composite
def numeric_frames(draw) -> pd.DataFrame:
    n_rows = draw(st.integers(2, 25))
    n_cols = draw(st.integers(1, 4))
    values = draw(
        st.lists(
            st.lists(
                st.floats(-1e4, 1e4, allow_nan=False, allow_infinity=False),
                min_size=n_rows,
                max_size=n_rows,
            ),
            min_size=n_cols,
            max_size=n_cols,
        )
    )
    holes = draw(
        st.lists(
            st.lists(st.booleans(), min_size=n_rows, max_size=n_rows),
            min_size=n_cols,
            max_size=n_cols,
        )
    )
    data = {}
    for j, (column, hole) in enumerate(zip(values, holes, strict=True)):
        column = np.asarray(column, float)
        hole = np.asarray(hole)
        # Keep one observed cell per column; a column with none is a separate test above.
        hole[draw(st.integers(0, n_rows - 1))] = False
        column[hole] = np.nan
        data[f"c{j}"] = column
    return pd.DataFrame(data)


@pytest.mark.parametrize("name", ["mean", "median", "mode", "knn", "chained-linear"])
@settings(max_examples=25, deadline=None)
@given(frame=numeric_frames())
def test_property_observed_kept_and_no_holes_left(name: str, frame: pd.DataFrame) -> None:
    before = frame.copy()
    out = quiet_fit_transform(make(name), frame, None)
    pd.testing.assert_frame_equal(frame, before, check_exact=True)
    assert_observed_kept(frame, out)
    assert not out.isna().to_numpy().any()
    assert (out.dtypes == np.float64).all()
