"""Tests for imputelab.survey.diagnostics.predictability against published formulas and references.

The AUC itself is checked against scikit-learn (sklearn.metrics.roc_auc_score) and its interval
against Hanley & McNeil (1982), *Radiology* 143:29-36.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from sklearn.metrics import roc_auc_score

from imputelab.bench.demo_data import write_trip_log
from imputelab.errors import DataError, OptionError
from imputelab.frame.encoding import derived_from, with_derived
from imputelab.frame.setup import default_action, working_setup
from imputelab.io.tables import read_table
from imputelab.survey.diagnostics.predictability import (
    CAUTION,
    MAR_AUC_THRESHOLD,
    VERDICT_DEPENDS,
    VERDICT_NO_DEPENDENCE,
    VERDICT_TOO_FEW,
    MissingnessCheck,
    _out_of_fold,
    hanley_mcneil_se,
    missingness_predictability,
)
from imputelab.survey.table import survey_table


def _sigmoid(x: np.ndarray) -> np.ndarray:
    return 1.0 / (1.0 + np.exp(-x))


def _features(seed: int, n: int = 2000) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    depot = rng.choice(["north", "south", "east"], size=n).astype(object)
    depot[rng.random(n) < 0.05] = None
    frame = pd.DataFrame({
        "x": rng.normal(size=n),
        "z1": rng.normal(size=n),
        "z2": rng.uniform(size=n),
        "depot": pd.Categorical(depot, categories=["east", "north", "south"]),
    })
    frame.loc[rng.random(n) < 0.05, "z1"] = np.nan
    return frame


def _mar_on_x(frame: pd.DataFrame, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed + 100)
    return rng.random(len(frame)) < _sigmoid(-1.5 + 2.0 * frame["x"].to_numpy())


# ------------------------------------------------------------------------ Hanley & McNeil


def test_hanley_mcneil_se_on_the_papers_worked_example() -> None:
    # Hanley & McNeil 1982, Radiology 143:29-36: the 109-patient CT rating example, 51
    # abnormal and 58 normal cases, A = 0.893 and SE = 0.032 (all from memory)
    a, n1, n0 = 0.893, 51, 58
    q1 = a / (2 - a)
    q2 = 2 * a**2 / (1 + a)
    by_hand = math.sqrt((a * (1 - a) + (n1 - 1) * (q1 - a**2) + (n0 - 1) * (q2 - a**2))
                        / (n1 * n0))
    assert hanley_mcneil_se(a, n1, n0) == pytest.approx(by_hand, rel=1e-12)
    assert hanley_mcneil_se(a, n1, n0) == pytest.approx(0.032, abs=0.0006)


@pytest.mark.parametrize(("n1", "n0"), [(7, 11), (40, 25), (300, 1200)])
def test_hanley_mcneil_se_at_half_is_the_mann_whitney_null_spread(n1: int, n0: int) -> None:
    # At A = 0.5, Q1 = Q2 = 1/3 and the formula reduces to sqrt((n1 + n0 + 1) / (12 n1 n0)):
    # the null standard deviation of U / (n1 n0) (Mann & Whitney 1947). The reference
    # spread is read back from scipy.stats.mannwhitneyu's normal approximation.
    rng = np.random.default_rng(n1 + n0)
    x, y = rng.normal(0.3, 1.0, n1), rng.normal(0.0, 1.0, n0)  # continuous: no ties
    res = scipy.stats.mannwhitneyu(x, y, method="asymptotic", use_continuity=False)
    sigma_u = abs(res.statistic - n1 * n0 / 2) / scipy.stats.norm.isf(res.pvalue / 2)
    assert hanley_mcneil_se(0.5, n1, n0) == pytest.approx(sigma_u / (n1 * n0), rel=1e-9)


def test_hanley_mcneil_se_is_zero_at_perfect_separation() -> None:
    # Hanley & McNeil 1982 formula: every term vanishes at A = 1
    assert hanley_mcneil_se(1.0, 30, 40) == 0.0


def test_hanley_mcneil_se_refuses_out_of_range_arguments() -> None:
    with pytest.raises(OptionError, match="auc must be"):
        hanley_mcneil_se(1.2, 10, 10)
    with pytest.raises(OptionError, match="`n_pos` must be"):
        hanley_mcneil_se(0.7, 0, 10)
    with pytest.raises(OptionError, match="`n_neg` must be"):
        hanley_mcneil_se(0.7, 10, 2.5)


# ------------------------------------------------------------------ the AUC and its interval


def test_auc_is_roc_auc_of_the_out_of_fold_predictions() -> None:
    frame = _features(1)
    missing = _mar_on_x(frame, 1)
    check = missingness_predictability(frame, missing, random_state=3)
    oof = _out_of_fold(frame, missing, n_splits=5, random_state=3, max_rows=20000)
    np.testing.assert_array_equal(oof.y, missing.astype(int))
    # reference library: sklearn.metrics.roc_auc_score
    assert check.auc == roc_auc_score(missing, oof.scores)
    # 95% interval: A ± 1.96 SE (Hanley & McNeil 1982), clipped to [0, 1]
    se = hanley_mcneil_se(check.auc, int(missing.sum()), int((~missing).sum()))
    assert check.auc_low == pytest.approx(max(0.0, check.auc - 1.96 * se), rel=1e-12)
    assert check.auc_high == pytest.approx(min(1.0, check.auc + 1.96 * se), rel=1e-12)


def test_mcar_blanks_show_no_dependence() -> None:
    frame = _features(2)
    missing = np.random.default_rng(7).random(len(frame)) < 0.2
    check = missingness_predictability(frame, missing)
    assert check.verdict == VERDICT_NO_DEPENDENCE
    # blanks drawn independently of every feature: the interval must cover a blind guess
    assert check.auc_low <= 0.5 <= check.auc_high
    assert check.drivers == []
    assert check.caution == CAUTION


def test_mar_blanks_depend_on_x_and_name_it_first() -> None:
    frame = _features(3)
    check = missingness_predictability(frame, _mar_on_x(frame, 3))
    assert check.verdict == VERDICT_DEPENDS
    assert check.auc_low > MAR_AUC_THRESHOLD
    assert check.drivers[0] == "x"
    assert len(check.drivers) <= 3


def test_blanks_that_follow_a_categorical_feature_are_found() -> None:
    frame = _features(4)
    rng = np.random.default_rng(11)
    on_north = (frame["depot"] == "north").to_numpy()
    missing = rng.random(len(frame)) < np.where(on_north, 0.5, 0.05)
    check = missingness_predictability(frame, missing)
    assert check.verdict == VERDICT_DEPENDS
    assert check.drivers[0] == "depot"


def test_feature_names_lightgbm_refuses_are_kept_in_the_report() -> None:
    frame = _features(5).rename(columns={"x": 'load "kg": {max}', "z1": "z"})
    frame.columns = [frame.columns[0], "z", "z", "depot"]  # repeated names too
    missing = np.random.default_rng(5).random(len(frame)) < _sigmoid(
        -1.5 + 2.0 * frame.iloc[:, 0].to_numpy())
    check = missingness_predictability(frame, missing, n_drivers=1)
    assert check.drivers == ['load "kg": {max}']


def test_too_few_blank_or_filled_cells_cannot_tell() -> None:
    frame = _features(6, n=500)
    few = np.zeros(500, dtype=bool)
    few[:19] = True
    for missing in (few, ~few):
        check = missingness_predictability(frame, missing)
        assert check.verdict == VERDICT_TOO_FEW
        assert (check.auc, check.auc_low, check.auc_high, check.drivers) == (None, None, None, [])
    assert missingness_predictability(frame, few).n_missing == 19
    few[19] = True  # 20 = min_missing is enough
    assert missingness_predictability(frame, few).verdict != VERDICT_TOO_FEW
    one = np.zeros(500, dtype=bool)
    one[0] = True  # a cross-validation cannot split a single blank, whatever min_missing says
    assert missingness_predictability(frame, one, min_missing=1).verdict == VERDICT_TOO_FEW


def test_to_dict_is_json_ready() -> None:
    frame = _features(7)
    check = missingness_predictability(frame, _mar_on_x(frame, 7))
    out = check.to_dict()
    assert set(out) == {"auc", "auc_low", "auc_high", "drivers", "verdict", "n_missing"}
    assert json.loads(json.dumps(out)) == out
    assert out["n_missing"] == check.n_missing and isinstance(out["n_missing"], int)
    none = missingness_predictability(frame, np.zeros(len(frame), dtype=bool)).to_dict()
    assert none["auc"] is None and none["verdict"] == VERDICT_TOO_FEW


def test_same_seed_same_result() -> None:
    frame = _features(8)
    missing = _mar_on_x(frame, 8)
    first = missingness_predictability(frame, missing, random_state=5)
    assert missingness_predictability(frame.copy(), missing.copy(), random_state=5) == first
    assert isinstance(first, MissingnessCheck)


def test_large_inputs_are_subsampled_within_each_class() -> None:
    frame = _features(9, n=3000)
    missing = _mar_on_x(frame, 9)
    oof = _out_of_fold(frame, missing, n_splits=5, random_state=0, max_rows=1000)
    assert len(oof.rows) == 1000 and np.all(np.diff(oof.rows) > 0)
    # stratified: the share of blanks is kept to within one row
    assert abs(oof.y.sum() - 1000 * missing.mean()) <= 1
    check = missingness_predictability(frame, missing, max_rows=1000)
    assert check.n_rows == 3000 and check.n_missing == int(missing.sum())
    assert check.auc == roc_auc_score(oof.y, oof.scores)  # reference: scikit-learn


def test_a_rare_class_is_kept_whole_when_subsampling() -> None:
    frame = _features(10, n=4000)
    missing = np.zeros(4000, dtype=bool)
    missing[::100] = True  # 40 blanks: 10 would be their share of 1000 rows
    oof = _out_of_fold(frame, missing, n_splits=5, random_state=0, max_rows=1000)
    assert len(oof.rows) == 1000 and oof.y.sum() == 40


def test_bad_inputs_are_refused() -> None:
    frame = _features(11, n=200)
    missing = np.zeros(200, dtype=bool)
    with pytest.raises(DataError, match="one entry per row"):
        missingness_predictability(frame, missing[:-1])
    with pytest.raises(DataError, match="booleans"):
        missingness_predictability(frame, np.full(200, 0.5))
    with pytest.raises(DataError, match="no columns"):
        missingness_predictability(frame[[]], missing)
    text = frame.assign(note=pd.Series(["a"] * 200, dtype="str"))
    with pytest.raises(DataError, match="'note' has dtype"):
        missingness_predictability(text, missing)
    with pytest.raises(DataError, match="pandas DataFrame"):
        missingness_predictability(frame.to_numpy(), missing)
    with pytest.raises(OptionError, match="n_splits"):
        missingness_predictability(frame, missing, n_splits=1)
    with pytest.raises(OptionError, match="n_drivers"):
        missingness_predictability(frame, missing, n_drivers=-1)
    with pytest.raises(OptionError, match="random_state"):
        missingness_predictability(frame, missing, random_state=None)


# --------------------------------------------------------------------------------- the demo


@pytest.fixture(scope="module")
def demo_working(tmp_path_factory: pytest.TempPathFactory) -> pd.DataFrame:
    path = write_trip_log(Path(tmp_path_factory.mktemp("demo")) / "trips.csv", n_trips=5000)
    survey = survey_table(read_table(path))
    actions = {name: default_action(col.spec.kind, drop=col.drop, is_target=False)
               for name, col in survey.columns.items()}
    _, encoding = working_setup(survey.typed, survey.specs, actions)
    return with_derived(encoding.encode(survey.typed), encoding.kinds)


def _check_demo_column(working: pd.DataFrame, name: str) -> MissingnessCheck:
    features = working.drop(columns=[name, *derived_from(name, list(working.columns))])
    return missingness_predictability(features, working[name].isna().to_numpy())


def test_demo_ambient_blanks_follow_the_departure_hour(demo_working: pd.DataFrame) -> None:
    # planted in imputelab.bench.demo_data: the sensor drops out mostly on night departures
    check = _check_demo_column(demo_working, "ambient_c")
    assert check.verdict == VERDICT_DEPENDS
    assert check.drivers[0] in derived_from("departed_at", list(demo_working.columns))
    assert check.drivers[0].endswith("__hour")


def test_demo_fuel_blanks_follow_the_distance_so_they_depend_on_observed_columns(
    demo_working: pd.DataFrame,
) -> None:
    # Planted MNAR on fuel_l's own value, and fuel grows with the distance driven: the
    # distance alone separates blank from filled fuel readings. Reference: the Mann-Whitney U
    # of distance_km between the two groups (scipy), whose U / (n1 n0) is the AUC of distance
    # as a score (Hanley & McNeil 1982, Radiology 143:29-36).
    distance = demo_working["distance_km"].to_numpy()
    blank = demo_working["fuel_l"].isna().to_numpy()
    known = ~np.isnan(distance)
    on_blank, on_filled = distance[known & blank], distance[known & ~blank]
    u = scipy.stats.mannwhitneyu(on_blank, on_filled, alternative="two-sided")
    assert u.pvalue < 1e-10
    assert u.statistic / (len(on_blank) * len(on_filled)) > 0.8
    check = _check_demo_column(demo_working, "fuel_l")
    assert check.verdict == VERDICT_DEPENDS
    assert check.drivers[0] == "distance_km"
    # the classifier sees at least what distance alone shows
    assert check.auc_low > 0.8
    assert check.caution == CAUTION


def _own_value_mnar(own: np.ndarray, seed: int) -> np.ndarray:
    """Blanks whose chance rises with the column's own value (logit slope 2 per SD)."""
    z = (own - own.mean()) / own.std()
    return np.random.default_rng(seed).random(len(own)) < _sigmoid(-1.5 + 2.0 * z)


def test_mnar_seen_through_a_correlated_column_depends_on_it() -> None:
    # The column's own value y = 0.9 x + noise (corr 0.9) decides its blanks. Given x, a blank
    # is still far more likely where x is high, so the blanks depend on an observed column:
    # the logistic regression of the blanks on x (scikit-learn) has a clearly positive slope
    # with an AUC of x alone (roc_auc_score) well above the 0.55 margin.
    frame = _features(5)
    rng = np.random.default_rng(55)
    y = 0.9 * frame["x"].to_numpy() + math.sqrt(1 - 0.81) * rng.normal(size=len(frame))
    missing = _own_value_mnar(y, 5)
    assert roc_auc_score(missing, frame["x"]) > 0.75
    check = missingness_predictability(frame, missing)
    assert check.verdict == VERDICT_DEPENDS
    assert check.drivers[0] == "x"


def test_mnar_on_a_value_no_other_column_carries_looks_like_no_dependence() -> None:
    # The same own-value mechanism on a y independent of every feature: the blanks are MNAR,
    # yet nothing observed carries them, so the verdict can only be "no detectable
    # dependence", which is why CAUTION says it is no evidence of MCAR (Little & Rubin,
    # Statistical Analysis with Missing Data, ch. 1: MNAR is not testable from the observed
    # data alone; from memory).
    frame = _features(6)
    y = np.random.default_rng(66).normal(size=len(frame))
    missing = _own_value_mnar(y, 6)
    for name in ("x", "z1", "z2"):
        known = frame[name].notna().to_numpy()
        assert abs(roc_auc_score(missing[known], frame[name][known]) - 0.5) < 0.05, name
    check = missingness_predictability(frame, missing)
    assert check.verdict == VERDICT_NO_DEPENDENCE
    assert check.auc_low <= 0.5 <= check.auc_high
    assert check.drivers == []
    assert "not evidence of MCAR" in check.caution


