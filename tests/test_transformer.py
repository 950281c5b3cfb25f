"""Tests for imputelab.fill.transformer.PlanImputer: a scikit-learn citizen that learns on the
training rows only, keeps every column's dtype and fills new rows without refitting."""

from __future__ import annotations

import copy
import warnings
from pathlib import Path
from typing import ClassVar

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer
from sklearn.exceptions import NotFittedError
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import StratifiedKFold, cross_val_score
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.utils.estimator_checks import (
    check_global_output_transform_pandas,
    check_set_output_transform,
    check_set_output_transform_pandas,
    check_transformer_get_feature_names_out,
    check_transformer_get_feature_names_out_pandas,
    parametrize_with_checks,
)
from threadpoolctl import threadpool_limits

import imputelab.fill.transformer as transformer_module
from imputelab.errors import PlanError
from imputelab.fill.frame import fill_table
from imputelab.fill.transformer import PlanImputer
from imputelab.io.tables import read_table
from imputelab.score.plan import ColumnPlan, Plan

# Cheap scoring: these tests are about what the transformer keeps and learns from, not about
# which method wins.
CHEAP = {"masks": ["mcar"], "repeats": 1}
LABELS = ["mean", "median", "mode", "chained-linear"]
CARGO = ["dairy", "fish", "fruit", "meat"]  # "fish" is a category no row holds


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    # Many tiny solves: BLAS threads make them slower, not faster.
    with threadpool_limits(limits=1):
        yield


# ------------------------------------------------------------- scikit-learn's own checks

# scikit-learn's developer guide ("Developing scikit-learn estimators": rolling your own
# estimator) names parametrize_with_checks as the test a compatible estimator passes. No
# check is expected to fail.
@parametrize_with_checks([PlanImputer(methods=["mean", "median"], **CHEAP)])
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)


@pytest.mark.parametrize("check", [
    check_set_output_transform,
    check_set_output_transform_pandas,
    check_global_output_transform_pandas,
    check_transformer_get_feature_names_out,
    check_transformer_get_feature_names_out_pandas,
], ids=lambda c: c.__name__)
def test_scikit_learn_output_and_feature_name_checks(check):
    # scikit-learn's set_output and feature-name checks, which parametrize_with_checks does
    # not run (scikit-learn 1.9 estimator_checks: they are outside its list).
    with warnings.catch_warnings():
        # The feature-name checks transform arrays after fitting on frames, on purpose.
        warnings.filterwarnings("ignore", message="X (does not have|has) .*feature names")
        check("PlanImputer", PlanImputer(methods=["mean", "median"], **CHEAP))


# ------------------------------------------------- a pipeline under cross-validation


class RowRecordingImputer(PlanImputer):
    """PlanImputer that records the row labels and the fitted state of every fit."""

    fits: ClassVar[list[tuple[np.ndarray, PlanImputer]]] = []

    def fit(self, X, y=None):
        super().fit(X, y)
        RowRecordingImputer.fits.append((X.index.to_numpy().copy(), copy.deepcopy(self)))
        return self


def breast_cancer_with_holes() -> tuple[pd.DataFrame, pd.Series]:
    # scikit-learn's bundled copy of the Wisconsin diagnostic breast-cancer data (569 rows,
    # 30 numeric features; sklearn.datasets.load_breast_cancer, scikit-learn documentation),
    # with 20% of the cells hidden completely at random.
    X, y = load_breast_cancer(return_X_y=True, as_frame=True)
    rng = np.random.default_rng(0)
    return X.mask(rng.random(X.shape) < 0.2), y


FOLDS = StratifiedKFold(n_splits=5, shuffle=True, random_state=0)


def pipeline(fill) -> Pipeline:
    return Pipeline([("fill", fill), ("scale", StandardScaler()),
                     ("model", LogisticRegression(max_iter=1000))])


@pytest.fixture(scope="module")
def cross_validated():
    # Cheap methods: this fixture is about which rows each fit sees, not about fill quality
    # (test_default_fill_of_hidden_breast_cancer_cells checks that, with the defaults).
    X, y = breast_cancer_with_holes()
    RowRecordingImputer.fits.clear()
    fill = RowRecordingImputer(methods=["mean", "median"], random_state=0, **CHEAP)
    cross_val_score(pipeline(fill), X, y, cv=FOLDS)  # each fit records its rows
    return X, y, list(RowRecordingImputer.fits)


def test_default_fill_of_hidden_breast_cancer_cells():
    # Data: scikit-learn's bundled Wisconsin diagnostic breast-cancer set
    # (sklearn.datasets.load_breast_cancer; 569 rows, 30 numeric features, no missing value,
    # per the scikit-learn documentation). To stay under ~15 s on one core, only its first
    # 10 columns (the "mean ..." measurements) are used; every row is kept, and PlanImputer
    # runs with its defaults (every registered method, the default masks, 3 repeats), as the
    # README presents it.
    X, _ = load_breast_cancer(return_X_y=True, as_frame=True)
    X = X.iloc[:, :10]
    assert X.notna().all().all()  # every hidden cell has a known true value
    hidden = np.random.default_rng(0).random(X.shape) < 0.2  # 20% of the cells, MCAR
    holes = X.mask(hidden)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # notes on the data are not under test here
        ours = PlanImputer(random_state=0).fit_transform(holes)
    # The outside reference, on the same hidden cells: scikit-learn's SimpleImputer(mean).
    reference = SimpleImputer(strategy="mean").fit_transform(holes)
    truth = X.to_numpy()
    assert not np.isnan(ours).any()
    np.testing.assert_array_equal(ours[~hidden], truth[~hidden])  # observed cells as given

    def nrmse(filled: np.ndarray) -> np.ndarray:
        # Per column: RMSE over the hidden cells divided by the standard deviation of their
        # true values (a mean fill scores about 1; common practice, no source).
        return np.array([np.sqrt(np.mean((filled[hidden[:, j], j] - truth[hidden[:, j], j])
                                         ** 2)) / truth[hidden[:, j], j].std()
                         for j in range(truth.shape[1])])

    ours_nrmse, reference_nrmse = nrmse(ours), nrmse(reference)
    print(f"\nNRMSE on {hidden.sum()} hidden breast-cancer cells: PlanImputer() "
          f"{ours_nrmse.mean():.3f}, SimpleImputer(mean) {reference_nrmse.mean():.3f}")
    assert ours_nrmse.mean() <= reference_nrmse.mean()
    # No column filled clearly worse than by its mean (5%: common practice, no source).
    assert (ours_nrmse <= 1.05 * reference_nrmse).all(), (ours_nrmse, reference_nrmse)


def test_the_imputer_never_sees_the_held_out_fold(cross_validated):
    # Fold marker: every fit records the row labels it was given; they must be exactly the
    # training rows of one fold, never a held-out row, and what was learned (the mean and
    # median fills, the observed ranges) must be computed from those rows alone.
    X, y, fits = cross_validated
    splits = list(FOLDS.split(X, y))
    assert len(fits) == len(splits)
    for (seen, fitted), (train, test) in zip(fits, splits, strict=True):
        np.testing.assert_array_equal(seen, X.index[train].to_numpy())
        assert not set(seen) & set(X.index[test])
        rows = X.loc[seen]
        like_all_rows = []
        for group in fitted.fitted_.groups:
            reference = {"mean": np.nanmean, "median": np.nanmedian}[group.method_name]
            for name, value in group.method.statistics_.items():
                # numpy's nanmean / nanmedian over the training rows as the reference
                assert value == pytest.approx(reference(rows[name].to_numpy()), rel=1e-12)
                like_all_rows.append(value == reference(X[name].to_numpy()))
        # ... and not over every row (a median can coincide on a few columns by chance)
        assert len(like_all_rows) == X.shape[1] and sum(like_all_rows) < 5
        for name, (low, high) in fitted.fitted_.encoding.ranges.items():
            assert (low, high) == (np.nanmin(rows[name]), np.nanmax(rows[name]))


# ------------------------------------------------------------------ mixed DataFrames


def trip_frame(n: int, seed: int) -> pd.DataFrame:
    """A small refrigerated-trip log: numbers, counts, labels, categories and timestamps,
    a fifth of every column missing, and an index that is neither 0..n-1 nor sorted."""
    rng = np.random.default_rng(seed)
    depot = rng.choice(["Derby", "Hull", "Leeds"], n)
    frame = pd.DataFrame({
        "temp_c": (np.where(depot == "Hull", 2.0, 5.0) + rng.normal(0, 0.5, n)).round(2),
        "stops": pd.array(rng.integers(0, 6, n), dtype="Int64"),
        "depot": pd.array(depot, dtype="str"),
        "cargo": pd.Categorical(rng.choice(["dairy", "fruit", "meat"], n), categories=CARGO),
        "departed": pd.Timestamp("2026-03-01")
        + pd.to_timedelta(rng.integers(0, 10**5, n), unit="min"),
    })
    for name in frame.columns:
        frame[name] = frame[name].mask(rng.random(n) < 0.2)
    frame.index = pd.Index(rng.permutation(n) + 1000, name="trip")
    return frame


@pytest.fixture(scope="module")
def trips() -> pd.DataFrame:
    return trip_frame(120, seed=1)


@pytest.fixture(scope="module")
def fitted_on_trips(trips) -> PlanImputer:
    imputer = PlanImputer(methods=LABELS, random_state=0, **CHEAP)
    return imputer.set_output(transform="pandas").fit(trips)


def assert_filled_like(before: pd.DataFrame, after: pd.DataFrame, learned: pd.DataFrame) -> None:
    """Dtypes and index kept, observed cells unchanged, every hole filled with a label or a
    value inside what ``learned`` holds."""
    assert after.index.equals(before.index)
    pd.testing.assert_series_equal(after.dtypes[before.columns], before.dtypes)
    for name in before.columns:
        seen = before[name].notna().to_numpy()
        pd.testing.assert_series_equal(after[name][seen], before[name][seen], check_exact=True)
        assert after[name].notna().all(), f"hole left in {name}"
        new = after[name][~seen]
        if isinstance(before[name].dtype, pd.CategoricalDtype) or name == "depot":
            assert set(new) <= set(learned[name].dropna()), name
        else:
            assert new.between(learned[name].min(), learned[name].max()).all(), name
    assert list(after["cargo"].cat.categories) == CARGO


def test_set_output_pandas_keeps_dtypes_observed_cells_and_labels(trips, fitted_on_trips):
    out = fitted_on_trips.transform(trips)
    assert isinstance(out, pd.DataFrame)
    assert list(out.columns) == list(trips.columns)
    assert_filled_like(trips, out, learned=trips)
    # A typed timestamp has no text format to give a coarser step: fills are whole seconds.
    assert (out["departed"].dt.microsecond == 0).all()


def test_default_output_is_an_array(trips, fitted_on_trips):
    imputer = clone(fitted_on_trips).set_output(transform="default").fit(trips)
    out = imputer.transform(trips)
    assert isinstance(out, np.ndarray) and out.dtype == object and out.shape == trips.shape
    expected = fitted_on_trips.transform(trips)
    assert out[:, 2].tolist() == expected["depot"].tolist()


def test_new_rows_are_filled_without_refitting(trips, fitted_on_trips, monkeypatch):
    # Fitting again would have to score or fit a plan: make both impossible.
    def refit(*args, **kwargs):
        raise AssertionError("transform refitted")

    monkeypatch.setattr(transformer_module, "fit_plan", refit)
    monkeypatch.setattr(transformer_module, "score_table", refit)
    later = trip_frame(40, seed=7)
    out = fitted_on_trips.transform(later)
    assert_filled_like(later, out, learned=trips)
    # The mean-filled column gets the training rows' mean (numpy's nanmean as reference),
    # not the new rows' own.
    assert fitted_on_trips.plan_.columns["stops"].method == "mean"
    holes = later["stops"].isna().to_numpy()
    training_mean = np.nanmean(trips["stops"].to_numpy(float, na_value=np.nan))
    assert (out["stops"][holes] == round(training_mean)).all()
    # A row filled alone equals the same row filled with the others (row-wise transform).
    one = later.iloc[[3]]
    pd.testing.assert_frame_equal(fitted_on_trips.transform(one), out.iloc[[3]])


def test_indicators_the_plan_asks_for_appear_in_the_output_and_the_names(trips, fitted_on_trips):
    plan = Plan.from_dict(fitted_on_trips.plan_.to_dict())
    plan.columns["depot"].indicator = True
    plan.columns["temp_c"].indicator = True
    imputer = PlanImputer(plan=plan).set_output(transform="pandas").fit(trips)
    out = imputer.transform(trips)
    flags = ["temp_c__was_missing", "depot__was_missing"]  # in the table's column order
    assert list(imputer.get_feature_names_out()) == [*trips.columns, *flags]
    assert list(out.columns) == list(imputer.get_feature_names_out())
    for flag in flags:
        name = flag.removesuffix("__was_missing")
        assert out[flag].dtype == np.int8
        np.testing.assert_array_equal(out[flag].to_numpy(), trips[name].isna().to_numpy())
    assert plan.columns["depot"].indicator  # the given plan is read, never changed


def test_dropped_columns_leave_the_output_and_the_names(trips, fitted_on_trips):
    plan = Plan.from_dict(fitted_on_trips.plan_.to_dict())
    plan.columns["cargo"].action = "drop"
    imputer = PlanImputer(plan=plan).set_output(transform="pandas").fit(trips)
    expected = ["temp_c", "stops", "depot", "departed"]
    assert list(imputer.get_feature_names_out()) == expected
    assert list(imputer.transform(trips).columns) == expected


def test_a_plan_path_fills_a_csv_frame_exactly_as_the_fill_command(trip_log_csv, trip_log_plan):
    # The CSV as read by imputelab (every column text): the transformer's output must be the
    # fill command's, cell for cell, including the dropped column and the indicator columns.
    table = read_table(trip_log_csv)
    plan = Plan.load(trip_log_plan)
    assert any(col.indicator for col in plan.columns.values())
    assert any(col.action == "drop" for col in plan.columns.values())
    expected, _ = fill_table(table, plan)
    imputer = PlanImputer(plan=trip_log_plan).set_output(transform="pandas")
    out = imputer.fit_transform(table.frame)
    assert list(out.columns) == list(expected.columns) == list(imputer.get_feature_names_out())
    flags = [c for c in out.columns if c.endswith("__was_missing")]
    pd.testing.assert_frame_equal(out.drop(columns=flags), expected.drop(columns=flags))
    pd.testing.assert_frame_equal(out[flags], expected[flags].astype("int8"))


def test_a_plan_saved_from_a_fit_refits_to_the_same_fill(tmp_path, trips, fitted_on_trips):
    path = fitted_on_trips.plan_.save(tmp_path / "plan.json")
    later = trip_frame(40, seed=7)
    again = PlanImputer(plan=str(path)).set_output(transform="pandas").fit(trips)
    pd.testing.assert_frame_equal(again.transform(later), fitted_on_trips.transform(later))


def test_same_random_state_same_plan_and_fill_and_it_overrides_the_plan_seed(trips):
    def fit(seed):
        imputer = PlanImputer(methods=LABELS, random_state=seed, **CHEAP)
        return imputer.set_output(transform="pandas").fit(trips)

    first, second, other = fit(3), fit(3), fit(4)
    assert first.plan_.to_json() == second.plan_.to_json()
    pd.testing.assert_frame_equal(first.transform(trips), second.transform(trips))
    # The seed reaches the scoring experiment: other hidden cells, other scores.
    assert first.plan_.columns["temp_c"].scores != other.plan_.columns["temp_c"].scores
    given = Plan.from_dict(first.plan_.to_dict())
    given.settings["seed"] = 11
    refit = PlanImputer(plan=given, random_state=5).fit(trips)
    assert refit.plan_.settings["seed"] == 5 and given.settings["seed"] == 11
    assert PlanImputer(plan=given).fit(trips).plan_.settings["seed"] == 11


def test_a_plan_target_column_may_be_absent_from_x(trips, fitted_on_trips):
    plan = Plan.from_dict(fitted_on_trips.plan_.to_dict())
    plan.columns["spoiled"] = ColumnPlan(kind="binary", missing_fraction=0.0, action="exclude")
    plan.settings["target"] = "spoiled"
    imputer = PlanImputer(plan=plan).fit(trips)
    assert "spoiled" not in imputer.plan_.columns
    assert list(imputer.get_feature_names_out()) == list(trips.columns)


# --------------------------------------------------------------------------- arrays


def mean_plan(n_columns: int) -> Plan:
    columns = {f"x{i}": ColumnPlan(kind="numeric", missing_fraction=0.0, action="impute",
                                   method="mean") for i in range(n_columns)}
    return Plan(source={}, settings={"seed": 0}, columns=columns)


def test_an_array_with_a_mean_plan_matches_scikit_learns_simple_imputer():
    # scikit-learn's SimpleImputer(strategy="mean") is the reference library: the same fills
    # on data with decimals (whole-number columns get whole fills in imputelab, on purpose).
    rng = np.random.default_rng(2)
    train = rng.normal(size=(50, 3))
    train[rng.random(train.shape) < 0.2] = np.nan
    test = rng.normal(size=(20, 3))
    test[rng.random(test.shape) < 0.3] = np.nan
    plan = mean_plan(3)
    for col in plan.columns.values():
        col.cleaning = {"kind": "numeric", "decimals": 12}  # round only far beyond float noise
    imputer = PlanImputer(plan=plan).fit(train)
    out = imputer.transform(test)
    assert isinstance(out, np.ndarray) and out.dtype == np.float64
    np.testing.assert_allclose(out, SimpleImputer(strategy="mean").fit(train).transform(test),
                               rtol=0, atol=1e-11)
    assert list(imputer.get_feature_names_out()) == ["x0", "x1", "x2"]
    plan.columns["x1"].indicator = True
    flagged = PlanImputer(plan=plan).fit(train)
    assert list(flagged.get_feature_names_out(["a", "b", "c"])) == ["a", "b", "c", "b__was_missing"]
    np.testing.assert_array_equal(flagged.transform(test)[:, 3], np.isnan(test[:, 1]))


# --------------------------------------------------------------------------- errors


def test_transform_before_fit_is_refused(trips):
    with pytest.raises(NotFittedError, match="not fitted yet"):
        PlanImputer().transform(trips)


def test_a_plan_for_other_columns_is_a_plan_error(trips, fitted_on_trips):
    plan = fitted_on_trips.plan_
    with pytest.raises(PlanError, match=r"planned but not in X: stops; in X but not in the "
                                        r"plan: n_stops"):
        PlanImputer(plan=plan).fit(trips.rename(columns={"stops": "n_stops"}))


def test_a_missing_plan_file_is_a_plan_error(tmp_path, trips):
    with pytest.raises(PlanError, match=r"no such file"):
        PlanImputer(plan=tmp_path / "nope.json").fit(trips)


@pytest.mark.parametrize(("params", "match"), [
    ({"methods": ["mean", "guess"]}, r"PlanImputer\(methods=\.\.\.\): unknown name 'guess'"),
    ({"masks": ["sometimes"]}, r"PlanImputer\(masks=\.\.\.\): unknown name 'sometimes'"),
    ({"repeats": 0}, r"PlanImputer: `repeats` must be a whole number of at least 1, got 0"),
    ({"repeats": True}, r"PlanImputer: `repeats` must be a whole number of at least 1"),
    ({"rate": 1.5}, r"PlanImputer: `rate` must be a number strictly between 0 and 1, got 1.5"),
    ({"random_state": -1}, r"PlanImputer: `random_state` must be a whole number of at least 0"),
])
def test_bad_parameters_are_value_errors_raised_in_fit(trips, params, match):
    imputer = PlanImputer(**params)  # the constructor only stores them
    with pytest.raises(ValueError, match=match):
        imputer.fit(trips)


def test_a_plan_of_the_wrong_type_is_a_type_error(trips):
    with pytest.raises(TypeError, match=r"must be a Plan, the path of a plan file or None, "
                                        r"not int"):
        PlanImputer(plan=3).fit(trips)


def test_infinity_in_a_frame_is_refused(trips):
    bad = trips.copy()
    bad.loc[bad.index[0], "temp_c"] = np.inf
    with pytest.raises(ValueError, match=r"Input X contains infinity in column 'temp_c'"):
        PlanImputer(methods=["mean"], **CHEAP).fit(bad)


def test_a_column_holding_another_sort_of_values_than_in_fit_is_refused(trips, fitted_on_trips):
    changed = trips.assign(depot=np.arange(len(trips), dtype=float))
    with pytest.raises(ValueError, match=r"column\(s\) 'depot' \(text in fit, numbers now\)"):
        fitted_on_trips.transform(changed)


def test_a_frame_with_duplicate_column_names_is_refused(trips):
    # scikit-learn's own validation says so (validate_data, scikit-learn 1.9).
    twice = pd.concat([trips, trips[["temp_c"]]], axis=1)
    with pytest.raises(ValueError, match=r"Expected unique column names, got:\n- 'temp_c' 2"):
        PlanImputer(methods=["mean"], **CHEAP).fit(twice)


def test_object_columns_are_read_as_numbers_or_labels():
    rng = np.random.default_rng(3)
    n = 60
    frame = pd.DataFrame({
        "load": pd.Series([float(v) for v in rng.normal(900, 50, n)], dtype=object),
        "depot": pd.Series(list(rng.choice(["Hull", "York"], n)), dtype=object),
    })
    frame = frame.apply(lambda c: c.mask(rng.random(n) < 0.2))
    imputer = PlanImputer(methods=["mean", "mode"], **CHEAP).set_output(transform="pandas")
    out = imputer.fit_transform(frame)
    assert {c.kind for c in imputer.plan_.columns.values()} == {"numeric", "binary"}
    assert all(pd.api.types.is_object_dtype(d) for d in out.dtypes)
    assert out.notna().all().all()
    assert set(out["depot"]) == {"Hull", "York"}
    seen = frame["load"].notna()
    assert out["load"][seen].tolist() == frame["load"][seen].tolist()


def test_plan_files_are_read_in_fit_not_in_the_constructor(tmp_path: Path):
    path = tmp_path / "later.json"
    imputer = PlanImputer(plan=path)  # nothing there yet, and no error
    mean_plan(2).save(path)
    imputer.fit(np.array([[1.5, 2.5], [np.nan, 3.5], [2.5, np.nan]]))
    assert imputer.get_params()["plan"] == path
    np.testing.assert_allclose(imputer.transform(np.array([[np.nan, np.nan]])), [[2.0, 3.0]])
