"""Tests for frame.encoding: typed table <-> working frame, and derived datetime features."""

from __future__ import annotations

import datetime as dt
import warnings

import numpy as np
import pandas as pd
import pytest

from imputelab.frame.encoding import Encoding, derived_from, is_categorical, with_derived

KINDS = {
    "temp_c": "numeric",
    "stops": "numeric",
    "depot": "categorical",
    "reefer": "binary",
    "departed": "datetime",
    "cargo": "categorical",
}


def trip_table() -> pd.DataFrame:
    """A small typed trip log: one column of each dtype the cleaner produces, with holes."""
    frame = pd.DataFrame(
        {
            "temp_c": [3.5, np.nan, -18.25, 4.0, np.nan, 2.0],
            "stops": pd.array([2, 5, pd.NA, 1, 3, pd.NA], dtype="Int64"),
            "depot": pd.Series(["Hull", None, "York", "Hull", "Leeds", None], dtype="str"),
            "reefer": pd.Series(["yes", "no", None, "yes", "yes", "no"], dtype="str"),
            "departed": pd.to_datetime(pd.Series(
                ["2026-01-05 06:30", None, "2026-01-07 22:15", "2026-01-10 13:00", None,
                 "2026-01-12 08:45"])).astype("datetime64[s]"),
            "cargo": pd.Categorical(["dairy", "meat", None, "dairy", None, "fruit"],
                                    categories=["dairy", "fish", "fruit", "meat"]),
        }
    )
    # Not 0..n-1, so that positional and label indexing cannot be confused unnoticed.
    frame.index = pd.Index([10, 11, 12, 13, 14, 15], name="trip")
    return frame


def fit(typed: pd.DataFrame, **kwargs) -> Encoding:
    return Encoding.fit(typed, {n: KINDS[n] for n in typed.columns}, **kwargs)


def put(working: pd.DataFrame, name: str, row: int, value) -> pd.DataFrame:
    """Write one cell of a working frame (copy-on-write safe)."""
    out = working.copy()
    column = out[name].copy()
    column.iloc[row] = value
    out[name] = column
    return out


def fill_holes(working: pd.DataFrame) -> pd.DataFrame:
    """Every hole of a working frame filled: numbers with a mid value, labels with the first."""
    out = working.copy()
    for name in out.columns:
        column = out[name]
        if is_categorical(column):
            out[name] = column.fillna(column.cat.categories[0])
        else:
            values = column.to_numpy(float)
            out[name] = column.fillna((np.nanmin(values) + np.nanmax(values)) / 2)
    return out


# --------------------------------------------------------------------------- the round trip


def test_encode_gives_float64_and_categorical_columns_only():
    typed = trip_table()
    working = fit(typed).encode(typed)
    assert list(working.columns) == list(typed.columns)
    assert working.index.equals(typed.index)
    for name, kind in KINDS.items():
        if kind in ("categorical", "binary"):
            assert is_categorical(working[name]), name
            assert not working[name].cat.ordered
        else:
            assert working[name].dtype == np.float64, name
        # a hole stays a hole, an observed cell stays observed
        np.testing.assert_array_equal(working[name].isna().to_numpy(),
                                      typed[name].isna().to_numpy())


def test_datetimes_encode_as_seconds_since_1970():
    typed = trip_table()
    working = fit(typed).encode(typed)
    # Reference: the standard library's POSIX timestamp of the same wall time read as UTC.
    expected = dt.datetime(2026, 1, 7, 22, 15, tzinfo=dt.UTC).timestamp()
    assert working["departed"].iloc[2] == expected


def test_decode_of_an_unfilled_working_frame_is_the_typed_table():
    typed = trip_table()
    enc = fit(typed)
    pd.testing.assert_frame_equal(enc.decode(enc.encode(typed), typed), typed, check_exact=True)


def test_decode_changes_only_the_holes_and_keeps_every_dtype():
    typed = trip_table()
    enc = fit(typed)
    out = enc.decode(fill_holes(enc.encode(typed)), typed)
    assert list(out.columns) == list(typed.columns)
    assert out.index.equals(typed.index)
    pd.testing.assert_series_equal(out.dtypes, typed.dtypes)
    for name in typed.columns:
        seen = typed[name].notna().to_numpy()
        pd.testing.assert_series_equal(out[name][seen], typed[name][seen], obj=name,
                                       check_exact=True)
        assert out[name].notna().all(), f"hole left in {name}"


def test_decode_leaves_a_column_alone_when_the_working_frame_lacks_it():
    typed = trip_table()
    enc = fit(typed)
    working = fill_holes(enc.encode(typed)).drop(columns=["temp_c"])
    out = enc.decode(working, typed)
    pd.testing.assert_series_equal(out["temp_c"], typed["temp_c"], check_exact=True)
    assert out["stops"].notna().all()


def test_decode_does_not_modify_its_inputs():
    typed = trip_table()
    enc = fit(typed)
    working = fill_holes(enc.encode(typed))
    typed_before, working_before = typed.copy(), working.copy()
    enc.decode(working, typed)
    pd.testing.assert_frame_equal(typed, typed_before, check_exact=True)
    pd.testing.assert_frame_equal(working, working_before, check_exact=True)


# ------------------------------------------------------------------------------ per dtype


def test_int64_fills_are_whole_numbers_and_stay_int64():
    typed = trip_table()[["stops"]]
    enc = fit(typed)
    assert enc.integer == {"stops": True}
    working = put(put(enc.encode(typed), "stops", 2, 2.6), "stops", 5, 4.4)
    out = enc.decode(working, typed)
    assert out["stops"].dtype == pd.Int64Dtype()
    assert out["stops"].tolist() == [2, 5, 3, 1, 3, 4]


def test_integer_flag_from_the_spec_rounds_float_columns_too():
    # A CSV column of whole numbers is cleaned to Int64, but a caller may pass float64 with
    # integer=True (the spec says whole numbers): fills are still rounded.
    typed = pd.DataFrame({"stops": [2.0, np.nan, 4.0]})
    enc = Encoding.fit(typed, {"stops": "numeric"}, integer={"stops": True})
    out = enc.decode(put(enc.encode(typed), "stops", 1, 2.7), typed)
    assert out["stops"].dtype == np.float64
    assert out["stops"].tolist() == [2.0, 3.0, 4.0]


def test_float64_fills_are_kept_as_given_and_stay_float64():
    typed = trip_table()[["temp_c"]]
    enc = fit(typed)
    assert enc.integer == {"temp_c": False}
    working = put(put(enc.encode(typed), "temp_c", 1, 1.234567891), "temp_c", 4, -7.5)
    out = enc.decode(working, typed)
    assert out["temp_c"].dtype == np.float64
    assert out["temp_c"].tolist() == [3.5, 1.234567891, -18.25, 4.0, -7.5, 2.0]


@pytest.mark.parametrize("unit", ["s", "ms", "us", "ns"])
@pytest.mark.parametrize(
    ("fmt", "step"),
    [(None, "s"), ("%Y-%m-%d %H:%M:%S", "s"), ("%Y-%m-%d %H:%M", "min"), ("%d/%m/%Y", "D")],
    ids=["no-format", "seconds", "minutes", "date-only"],
)
def test_datetime_fills_keep_the_unit_and_the_format_resolution(unit, fmt, step):
    typed = trip_table()[["departed"]].astype({"departed": f"datetime64[{unit}]"})
    enc = fit(typed, date_formats={"departed": fmt})
    fill = pd.Timestamp("2026-01-08 17:41:37.6")
    seconds = (fill - pd.Timestamp("1970-01-01")).total_seconds()
    out = enc.decode(put(enc.encode(typed), "departed", 1, seconds), typed)
    assert out["departed"].dtype == np.dtype(f"datetime64[{unit}]")
    # Reference: pandas' own Timestamp.round to the format's smallest field.
    assert out["departed"].iloc[1] == fill.round(step)
    assert out["departed"].isna().sum() == 1  # the hole that was not filled


def test_minute_formats_get_whole_minutes():
    typed = trip_table()[["departed"]]
    enc = fit(typed, date_formats={"departed": "%Y-%m-%d %H:%M"})
    assert enc.resolution == {"departed": 60}
    working = fill_holes(enc.encode(typed))
    working["departed"] = working["departed"] + 29.0  # off the minute grid
    out = enc.decode(working, typed)
    filled = out["departed"][typed["departed"].isna().to_numpy()]
    assert (filled.dt.second == 0).all()
    assert (filled.dt.microsecond == 0).all()


def test_dates_beyond_the_nanosecond_range_round_trip():
    values = np.array(["2026-03-01", "NaT", "9999-12-31", "2026-03-05"], dtype="datetime64[us]")
    typed = pd.DataFrame({"valid_until": values})
    enc = Encoding.fit(typed, {"valid_until": "datetime"},
                       date_formats={"valid_until": "%Y-%m-%d"})
    working = enc.encode(typed)
    # Reference: the standard library's POSIX timestamp of 9999-12-31 read as UTC.
    assert working["valid_until"].iloc[2] == dt.datetime(9999, 12, 31, tzinfo=dt.UTC).timestamp()
    fill = pd.Timestamp("2030-06-15")
    out = enc.decode(put(working, "valid_until", 1, (fill - pd.Timestamp(0)).total_seconds()),
                     typed)
    assert out["valid_until"].dtype == np.dtype("datetime64[us]")
    assert out["valid_until"].iloc[1] == fill


def test_timezone_aware_datetimes_keep_their_zone_and_instant():
    # Parquet files carry zone-aware timestamps; _assign has a branch for them.
    stamps = pd.to_datetime(pd.Series(["2026-01-05 06:30", None, "2026-01-07 22:15"]))
    typed = pd.DataFrame({"departed": stamps.dt.tz_localize("Europe/Berlin")})
    enc = Encoding.fit(typed, {"departed": "datetime"})
    working = enc.encode(typed)
    fill = pd.Timestamp("2026-01-06 12:00", tz="Europe/Berlin")
    out = enc.decode(put(working, "departed", 1, fill.timestamp()), typed)
    assert out["departed"].dtype == typed["departed"].dtype
    assert out["departed"].iloc[1] == fill


def test_timezone_aware_fill_lands_on_the_same_instant():
    # Built by hand so that decode is tested on its own, without fit.
    stamps = pd.to_datetime(pd.Series(["2026-01-05 06:30", None, "2026-01-07 22:15"]))
    typed = pd.DataFrame({"departed": stamps.dt.tz_localize("Europe/Berlin")})
    enc = Encoding(kinds={"departed": "datetime"})
    fill = pd.Timestamp("2026-01-06 12:00", tz="Europe/Berlin")
    working = pd.DataFrame({"departed": [np.nan, fill.timestamp(), np.nan]})
    out = enc.decode(working, typed)
    assert out["departed"].dtype == typed["departed"].dtype
    assert out["departed"].iloc[1] == fill


def test_str_labels_come_only_from_the_observed_labels():
    typed = trip_table()[["depot", "reefer"]]
    enc = fit(typed)
    assert enc.categories == {"depot": ["Hull", "Leeds", "York"], "reefer": ["no", "yes"]}
    working = enc.encode(typed)
    for name in ("depot", "reefer"):
        assert list(working[name].cat.categories) == enc.categories[name]
    out = enc.decode(fill_holes(working), typed)
    for name in ("depot", "reefer"):
        assert pd.api.types.is_string_dtype(out[name].dtype)
        assert not isinstance(out[name].dtype, pd.CategoricalDtype)
        assert set(out[name]) <= set(typed[name].dropna())


def test_labels_unseen_at_fit_encode_as_missing():
    enc = fit(trip_table()[["depot"]])
    later = pd.DataFrame({"depot": pd.Series(["York", "Derby", None], dtype="str")})
    working = enc.encode(later)
    assert working["depot"].isna().tolist() == [False, True, True]
    assert list(working["depot"].cat.categories) == ["Hull", "Leeds", "York"]


def test_unseen_labels_encode_without_deprecated_pandas_behaviour():
    enc = fit(trip_table()[["depot"]])
    later = pd.DataFrame({"depot": pd.Series(["York", "Derby", None], dtype="str")})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        working = enc.encode(later)
    assert working["depot"].isna().tolist() == [False, True, True]


def test_categorical_columns_keep_their_dtype_and_categories():
    typed = trip_table()[["cargo"]]
    enc = fit(typed)
    # The working frame knows only the labels that were seen; "fish" was never observed.
    assert enc.categories == {"cargo": ["dairy", "fruit", "meat"]}
    out = enc.decode(put(put(enc.encode(typed), "cargo", 2, "meat"), "cargo", 4, "fruit"),
                     typed)
    assert out["cargo"].dtype == typed["cargo"].dtype
    assert list(out["cargo"].cat.categories) == ["dairy", "fish", "fruit", "meat"]
    assert out["cargo"].tolist() == ["dairy", "meat", "meat", "dairy", "fruit", "fruit"]


def test_ordered_categorical_with_number_labels_keeps_its_dtype():
    typed = pd.DataFrame({"grade": pd.Categorical([3, None, 1, 3], categories=[1, 2, 3],
                                                  ordered=True)})
    enc = Encoding.fit(typed, {"grade": "categorical"})
    out = enc.decode(put(enc.encode(typed), "grade", 1, 1), typed)
    assert out["grade"].dtype == typed["grade"].dtype
    assert out["grade"].tolist() == [3, 1, 1, 3]


def test_nullable_boolean_binary_column_stays_boolean():
    typed = pd.DataFrame({"reefer": pd.array([True, None, False, True], dtype="boolean")})
    enc = Encoding.fit(typed, {"reefer": "binary"})
    working = enc.encode(typed)
    assert is_categorical(working["reefer"])
    out = enc.decode(put(working, "reefer", 1, False), typed)
    assert out["reefer"].dtype == pd.BooleanDtype()
    assert out["reefer"].tolist() == [True, False, False, True]


# ------------------------------------------------------------------------------- clipping


def test_numeric_fills_are_clipped_to_the_observed_range():
    typed = trip_table()[["temp_c", "stops"]]
    enc = fit(typed)
    assert enc.ranges == {"temp_c": (-18.25, 4.0), "stops": (1.0, 5.0)}
    working = enc.encode(typed)
    working = put(put(working, "temp_c", 1, 99.0), "temp_c", 4, -1e6)
    working = put(put(working, "stops", 2, -3.0), "stops", 5, 12.0)
    out = enc.decode(working, typed)
    assert out["temp_c"].iloc[[1, 4]].tolist() == [4.0, -18.25]
    assert out["stops"].iloc[[2, 5]].tolist() == [1, 5]


def test_datetime_fills_are_clipped_to_the_observed_range():
    typed = trip_table()[["departed"]]
    enc = fit(typed)
    out = enc.decode(put(put(enc.encode(typed), "departed", 1, 0.0), "departed", 4, 4e9),
                     typed)
    assert out["departed"].iloc[1] == pd.Timestamp("2026-01-05 06:30")
    assert out["departed"].iloc[4] == pd.Timestamp("2026-01-12 08:45")


def test_a_column_with_nothing_observed_has_no_range_and_is_not_clipped():
    typed = pd.DataFrame({"temp_c": [np.nan, np.nan]})
    enc = Encoding.fit(typed, {"temp_c": "numeric"})
    assert enc.ranges == {}
    out = enc.decode(put(enc.encode(typed), "temp_c", 0, 7.5), typed)
    assert out["temp_c"].iloc[0] == 7.5


# ------------------------------------------------------------------------ derived features


def two_stamps() -> tuple[pd.DataFrame, dict[str, str]]:
    typed = pd.DataFrame({
        "departed": pd.to_datetime(pd.Series(["2026-01-01 10:00", "2026-03-14 23:59", None,
                                              "2026-06-30 00:30"])),
        "arrived": pd.to_datetime(pd.Series(["2026-01-01 13:30", None, "2026-05-02 08:00",
                                             "2026-07-01 02:00"])),
        "load_kg": [1200.0, 800.0, np.nan, 950.0],
    })
    kinds = {"departed": "datetime", "arrived": "datetime", "load_kg": "numeric"}
    return Encoding.fit(typed, kinds).encode(typed), kinds


def test_with_derived_adds_components_that_match_the_calendar():
    working, kinds = two_stamps()
    out = with_derived(working, kinds)
    pd.testing.assert_frame_equal(out[list(working.columns)], working, check_exact=True)
    raw = ["2026-01-01 10:00", "2026-03-14 23:59", None, "2026-06-30 00:30"]
    for row, text in enumerate(raw):
        parts = [out[f"departed__{p}"].iloc[row] for p in ("year", "month", "day_of_week", "hour")]
        if text is None:
            assert np.isnan(parts).all()
            continue
        # Reference: the standard library calendar (weekday(): Monday is 0).
        when = dt.datetime.fromisoformat(text)
        assert parts == [when.year, when.month, when.weekday(), when.hour]


def test_with_derived_adds_durations_in_hours_between_each_pair():
    working, kinds = two_stamps()
    out = with_derived(working, kinds)
    duration = out["arrived__minus__departed"]
    assert duration.iloc[0] == 3.5
    assert duration.iloc[3] == 25.5
    # missing on either side: no duration
    assert duration.iloc[[1, 2]].isna().all()
    assert out["arrived__hour"].iloc[1] != out["arrived__hour"].iloc[1]  # NaN
    assert out.shape[1] == working.shape[1] + 4 + 4 + 1


def test_with_derived_without_datetimes_returns_the_frame_unchanged():
    working = pd.DataFrame({"load_kg": [1.0, np.nan]})
    out = with_derived(working, {"load_kg": "numeric"})
    pd.testing.assert_frame_equal(out, working, check_exact=True)


def test_with_derived_ignores_datetime_kinds_absent_from_the_frame():
    working, kinds = two_stamps()
    out = with_derived(working.drop(columns=["arrived"]), kinds)
    assert [c for c in out.columns if "arrived" in c] == []
    assert "departed__year" in out.columns


def test_derived_from_lists_every_feature_made_from_a_column():
    working, kinds = two_stamps()
    columns = list(with_derived(working, kinds).columns)
    assert derived_from("departed", columns) == [
        "departed__year", "departed__month", "departed__day_of_week", "departed__hour",
        "arrived__minus__departed",
    ]
    assert derived_from("arrived", columns) == [
        "arrived__year", "arrived__month", "arrived__day_of_week", "arrived__hour",
        "arrived__minus__departed",
    ]
    assert derived_from("load_kg", columns) == []


def test_derived_features_never_see_a_masked_timestamp():
    # with_derived runs after masking: a hidden departure must leave its features empty.
    working, kinds = two_stamps()
    masked = put(working, "departed", 0, np.nan)
    out = with_derived(masked, kinds)
    assert out.loc[0, derived_from("departed", list(out.columns))].isna().all()
