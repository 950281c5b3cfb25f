"""The built-in trip log: format, determinism and the planted missingness mechanisms.

Planted rates come from the project's own design (demo_data.PLANTED); the tolerances
around them are common practice, no source. Mechanism checks lean on scipy.stats and
scikit-learn as reference libraries.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.linear_model import LinearRegression

from imputelab.bench.demo_data import (
    DEMO_COLUMNS,
    PLANTED,
    _make_trip_log_with_truth,
    make_trip_log,
    write_trip_log,
)
from imputelab.errors import OptionError, TableIOError

N = 5000


@pytest.fixture(scope="module")
def pair() -> tuple[pd.DataFrame, pd.DataFrame]:
    return _make_trip_log_with_truth(N)


@pytest.fixture(scope="module")
def frame(pair: tuple[pd.DataFrame, pd.DataFrame]) -> pd.DataFrame:
    return pair[0]


@pytest.fixture(scope="module")
def truth(pair: tuple[pd.DataFrame, pd.DataFrame]) -> pd.DataFrame:
    return pair[1]


def _num(col: pd.Series) -> pd.Series:
    return pd.to_numeric(col.where(col != ""), errors="raise")


def test_same_seed_gives_identical_frame(frame: pd.DataFrame) -> None:
    pd.testing.assert_frame_equal(make_trip_log(N), frame)


def test_public_function_matches_truth_variant(frame: pd.DataFrame) -> None:
    pd.testing.assert_frame_equal(make_trip_log(), frame)


def test_different_seed_gives_different_frame(frame: pd.DataFrame) -> None:
    other = make_trip_log(N, seed=7)
    assert other.shape == frame.shape
    assert (other["distance_km"] != frame["distance_km"]).mean() > 0.9


def test_shape_and_column_order(frame: pd.DataFrame, truth: pd.DataFrame) -> None:
    assert frame.shape == (N, 15)
    assert tuple(frame.columns) == DEMO_COLUMNS
    assert tuple(truth.columns) == DEMO_COLUMNS
    assert set(PLANTED) == set(DEMO_COLUMNS)


def test_every_column_is_str_without_nan(frame: pd.DataFrame) -> None:
    for name in DEMO_COLUMNS:
        assert isinstance(frame[name].dtype, pd.StringDtype), name
        assert pd.api.types.is_string_dtype(frame[name]), name
        assert frame[name].notna().all(), name


def test_trip_id_unique_and_never_blank(frame: pd.DataFrame) -> None:
    ids = frame["trip_id"]
    assert ids.is_unique
    assert ids.str.fullmatch(r"RF-26-\d{6}").all()


def test_timestamps_format_and_order(frame: pd.DataFrame) -> None:
    for name in ("departed_at", "arrived_at"):
        filled = frame[name][frame[name] != ""]
        assert filled.str.fullmatch(r"2026-\d\d-\d\d \d\d:\d\d").all(), name
    dep = pd.to_datetime(frame["departed_at"].where(frame["departed_at"] != ""))
    arr = pd.to_datetime(frame["arrived_at"].where(frame["arrived_at"] != ""))
    both = dep.notna() & arr.notna()
    assert (arr[both] > dep[both]).all()
    assert dep.min() >= pd.Timestamp("2026-01-01")
    assert dep.max() < pd.Timestamp("2026-07-01")
    night = (dep.dt.hour >= 22) | (dep.dt.hour < 6)
    assert 0.2 < night[dep.notna()].mean() < 0.45


def test_mcar_blank_rates_near_planted(frame: pd.DataFrame) -> None:
    planted = {
        "depot": 0.01,
        "departed_at": 0.015,
        "arrived_at": 0.02,
        "distance_km": 0.03,
        "cargo_class": 0.01,
        "spoiled": 0.005,
    }
    for name, rate in planted.items():
        observed = (frame[name] == "").mean()
        assert 0.4 * rate < observed < 1.8 * rate, name


def test_arrival_blanks_independent_of_distance(frame: pd.DataFrame, truth: pd.DataFrame) -> None:
    # Two-sided Mann-Whitney U (scipy.stats.mannwhitneyu): an MCAR column's blanks should not
    # pick out longer or shorter trips.
    blank = (frame["arrived_at"] == "").to_numpy()
    dist = truth["distance_km"].to_numpy()
    assert stats.mannwhitneyu(dist[blank], dist[~blank]).pvalue > 0.001


def test_distance_positive_skewed_one_decimal(frame: pd.DataFrame) -> None:
    filled = frame["distance_km"][frame["distance_km"] != ""]
    assert filled.str.fullmatch(r"\d+\.\d").all()
    dist = filled.astype(float)
    assert dist.between(20, 900).all()
    # Right skew: sample skewness (scipy.stats.skew) is positive.
    assert stats.skew(dist) > 0.5


def test_setpoint_blank_exactly_for_dry(frame: pd.DataFrame, truth: pd.DataFrame) -> None:
    dry = frame["cargo_class"] == "dry"
    blank = frame["setpoint_c"] == ""
    assert dry.sum() > 0
    assert blank[dry].all()
    refrigerated = ~dry & (frame["cargo_class"] != "")
    assert blank[refrigerated].mean() < 0.03
    # A blank class still hides a consistent setpoint.
    hidden = frame["cargo_class"] == ""
    assert (blank[hidden] == (truth["cargo_class"][hidden] == "dry")).mean() > 0.9
    assert truth["setpoint_c"][truth["cargo_class"] == "dry"].isna().all()


def test_setpoint_ranges_by_class(frame: pd.DataFrame) -> None:
    bounds = {"frozen": (-25, -18), "chilled": (2, 4), "pharma": (2, 8), "produce": (4, 12)}
    setpoint = _num(frame["setpoint_c"])
    for cls, (low, high) in bounds.items():
        values = setpoint[frame["cargo_class"] == cls].dropna()
        assert len(values) > 0, cls
        assert values.between(low, high).all(), cls


def test_cargo_levels_and_dry_share(frame: pd.DataFrame) -> None:
    levels = set(frame["cargo_class"]) - {""}
    assert levels == {"frozen", "chilled", "pharma", "produce", "dry"}
    assert 0.15 < (frame["cargo_class"] == "dry").mean() < 0.25


def test_depot_has_five_unequal_levels(frame: pd.DataFrame) -> None:
    counts = frame["depot"][frame["depot"] != ""].value_counts()
    assert len(counts) == 5
    assert counts.max() > 2 * counts.min()


def test_payload_tokens_present(frame: pd.DataFrame) -> None:
    payload = frame["payload_kg"]
    numeric = payload.str.fullmatch(r"\d+")
    tokens = payload[~numeric & (payload != "")].value_counts()
    assert set(tokens.index) == {"not weighed", "n/a", "?"}
    assert 30 <= tokens.sum() <= 50
    assert tokens["not weighed"] > tokens["n/a"] + tokens["?"]
    assert payload[numeric].astype(int).between(200, 24000).all()
    assert 0.02 < (payload == "").mean() < 0.06


def test_door_open_has_no_zeros(frame: pd.DataFrame, truth: pd.DataFrame) -> None:
    door = frame["door_open_min"]
    assert not door.isin(["0", "0.0", "-0.0", "0.00"]).any()
    assert (_num(door).dropna() >= 0.1).all()
    blank = door == ""
    assert 0.3 < blank.mean() < 0.4
    # Blank means zero: the hidden truth is exactly zero there and positive elsewhere.
    assert (truth["door_open_min"][blank] == 0).all()
    assert (truth["door_open_min"][~blank] > 0).all()


def test_ambient_blanks_far_more_at_night(frame: pd.DataFrame, truth: pd.DataFrame) -> None:
    hour = truth["departed_at"].dt.hour
    night = ((hour >= 22) | (hour < 6)).to_numpy()
    blank = (frame["ambient_c"] == "").to_numpy()
    night_rate, day_rate = blank[night].mean(), blank[~night].mean()
    assert 0.22 < night_rate < 0.38
    assert 0.02 < day_rate < 0.06
    # Pearson's chi-squared test of independence (scipy.stats.chi2_contingency).
    table = [[(night & blank).sum(), (night & ~blank).sum()],
             [(~night & blank).sum(), (~night & ~blank).sum()]]  # fmt: skip
    assert stats.chi2_contingency(table).pvalue < 1e-20


def test_ambient_depends_on_hour_and_month(truth: pd.DataFrame) -> None:
    hour = truth["departed_at"].dt.hour
    month = truth["departed_at"].dt.month
    ambient = truth["ambient_c"]
    night = (hour >= 22) | (hour < 6)
    assert ambient[night].mean() < ambient[~night].mean() - 2
    assert ambient[month == 6].mean() > ambient[month == 1].mean() + 8


def test_fuel_blanks_concentrate_in_high_true_values(
    frame: pd.DataFrame, truth: pd.DataFrame
) -> None:
    blank = (frame["fuel_l"] == "").to_numpy()
    fuel = truth["fuel_l"].to_numpy()
    assert 0.12 < blank.mean() < 0.18
    top = fuel > np.quantile(fuel, 0.75)
    assert blank[top].mean() > 0.4
    assert blank[~top].mean() < 0.05
    # One-sided Mann-Whitney U (scipy.stats.mannwhitneyu): lost readings are larger.
    assert stats.mannwhitneyu(fuel[blank], fuel[~blank], alternative="greater").pvalue < 1e-50


def test_fuel_predictable_from_distance_and_payload(frame: pd.DataFrame) -> None:
    # A model must beat the mean, or method comparison on this table would be pointless;
    # scikit-learn's LinearRegression.score gives R^2.
    cols = ["distance_km", "payload_kg", "fuel_l"]
    rows = frame[cols].apply(lambda c: c.str.fullmatch(r"[\d.]+")).all(axis=1)
    data = frame.loc[rows, cols].astype(float)
    model = LinearRegression().fit(data[["distance_km", "payload_kg"]], data["fuel_l"])
    assert model.score(data[["distance_km", "payload_kg"]], data["fuel_l"]) > 0.8


def test_trip_duration_follows_distance(truth: pd.DataFrame) -> None:
    hours = (truth["arrived_at"] - truth["departed_at"]).dt.total_seconds() / 3600
    speed = truth["distance_km"] / hours
    assert speed.median() > 40 and speed.median() < 75
    # Spearman rank correlation (scipy.stats.spearmanr).
    assert stats.spearmanr(truth["distance_km"], hours).statistic > 0.9


def test_driver_rating_sentinel(frame: pd.DataFrame) -> None:
    rating = frame["driver_rating"]
    assert set(rating) <= {"1", "2", "3", "4", "5", "99"}
    assert 0.015 < (rating == "99").mean() < 0.045
    assert (rating != "").all()


def test_remark_blank_half_and_varied(frame: pd.DataFrame) -> None:
    remark = frame["remark"]
    assert 0.45 < (remark == "").mean() < 0.55
    assert remark[remark != ""].nunique() > 500
    dry = (frame["cargo_class"] == "dry").to_numpy()
    assert not remark[dry].str.contains("reefer|probe").any()


def test_customs_ref_mostly_blank(frame: pd.DataFrame, truth: pd.DataFrame) -> None:
    customs = frame["customs_ref"]
    assert 0.6 < (customs == "").mean() < 0.8
    assert customs[customs != ""].str.fullmatch(r"CX-[0-9A-F]{6}").all()
    present = (customs != "").to_numpy()
    assert truth["distance_km"][present].median() > truth["distance_km"][~present].median()


def test_spoiled_rate_and_drivers(frame: pd.DataFrame, truth: pd.DataFrame) -> None:
    assert set(frame["spoiled"]) == {"yes", "no", ""}
    assert 0.025 < (frame["spoiled"] == "yes").mean() < 0.055
    spoiled = truth["spoiled"].to_numpy()
    for name in ("door_open_min", "ambient_c", "distance_km"):
        values = truth[name].to_numpy()
        # One-sided Mann-Whitney U (scipy.stats.mannwhitneyu).
        test = stats.mannwhitneyu(values[spoiled], values[~spoiled], alternative="greater")
        assert test.pvalue < 0.01, name


def test_numbers_are_plain_decimals(frame: pd.DataFrame) -> None:
    for name in ("distance_km", "setpoint_c", "ambient_c", "door_open_min", "fuel_l"):
        filled = frame[name][frame[name] != ""]
        assert filled.str.fullmatch(r"-?\d+\.\d").all(), name
        assert not filled.str.startswith("-0.0").any(), name


def test_write_round_trip(tmp_path, frame: pd.DataFrame) -> None:
    path = write_trip_log(tmp_path / "trips.csv", n_trips=N)
    assert path == tmp_path / "trips.csv"
    back = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
    pd.testing.assert_frame_equal(back, frame, check_dtype=False)
    assert path.read_text(encoding="utf-8").splitlines()[0] == ",".join(DEMO_COLUMNS)


def test_write_to_missing_folder_raises(tmp_path) -> None:
    with pytest.raises(TableIOError, match="cannot write demo table"):
        write_trip_log(tmp_path / "nowhere" / "trips.csv", n_trips=10)


@pytest.mark.parametrize("n", [1, 2, 7, 60])
def test_small_tables_work(n: int) -> None:
    small = make_trip_log(n)
    assert small.shape == (n, 15)
    assert small["trip_id"].is_unique


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"n_trips": 0}, "between 1 and"),
        ({"n_trips": 2.5}, "n_trips must be an integer"),
        ({"n_trips": True}, "n_trips must be an integer"),
        ({"seed": -1}, "seed must be non-negative"),
        ({"seed": "x"}, "seed must be an integer"),
    ],
)
def test_bad_arguments_raise(kwargs: dict, message: str) -> None:
    with pytest.raises(OptionError, match=message):
        make_trip_log(**kwargs)
