"""Tests for score.experiment: the grid, its seeds, its failures, and what it measures."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from sklearn.impute import SimpleImputer
from sklearn.metrics import mean_squared_error
from threadpoolctl import threadpool_limits

import imputelab.score.experiment as experiment
from imputelab.errors import OptionError
from imputelab.executors.seeds import derive_seed
from imputelab.fill.frame import fill_table
from imputelab.io.columns import ColumnSpec
from imputelab.io.tables import read_table
from imputelab.methods import get_method
from imputelab.methods.simple import MedianFill
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.experiment import run_experiment
from imputelab.score.heldout import draw_held_out, expected_errors
from imputelab.score.plan import Plan
from imputelab.score.reasons import structural_value as _structural_value
from imputelab.survey.table import SurveyOptions

CHEAP = {"mean": {}, "median": {}, "mode": {}, "chained-linear": {}}
KINDS = {"transit_h": "numeric", "temp_c": "numeric", "door": "binary", "depot": "categorical"}
SORT = ["column", "method", "mask", "repeat"]


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    # Tiny solves spread over BLAS threads are several times slower, not faster.
    with threadpool_limits(limits=1):
        yield


def trip_working(n: int = 240, seed: int = 0) -> pd.DataFrame:
    """A working frame of a trip log: two correlated numbers and two label columns."""
    rng = np.random.default_rng(seed)
    transit = rng.gamma(3.0, 4.0, n)
    temp = 2.0 + 0.3 * transit + rng.normal(0.0, 1.0, n)
    door = np.where(temp + rng.normal(0.0, 1.0, n) > np.median(temp), "open", "shut")
    depot = rng.choice(["Hull", "Leeds", "York"], n, p=[0.5, 0.3, 0.2])
    frame = pd.DataFrame({
        "transit_h": transit,
        "temp_c": temp,
        "door": pd.Categorical(door),
        "depot": pd.Categorical(depot),
    })
    for name in frame.columns:
        holes = rng.random(n) < 0.1
        column = frame[name].copy()
        column[holes] = np.nan
        frame[name] = column
    return frame


def sorted_scores(result) -> pd.DataFrame:
    return result.scores.sort_values(SORT).reset_index(drop=True)


class Spy:
    """Wraps get_method so that every masked frame handed to a method is kept."""

    def __init__(self, columns):
        self.columns = list(columns)
        self.seen: list[tuple[str, np.ndarray, pd.DataFrame]] = []

    def __call__(self, name, **params):
        method = get_method(name, **params)
        real = method.fit_transform

        def fit_transform(X, targets=None):
            self.seen.append((name, X[self.columns].isna().to_numpy(), X))
            return real(X, targets)

        method.fit_transform = fit_transform
        return method


# ------------------------------------------------------------------------- the grid


def test_scores_are_tidy_one_row_per_column_method_mask_repeat():
    working = trip_working()
    result = run_experiment(working, KINDS, list(KINDS), methods=CHEAP,
                            masks=("mcar", "mar"), repeats=2, seed=1)
    scores = result.scores
    assert list(scores.columns[:5]) == ["column", "method", "mask", "repeat", "n_hidden"]
    assert not scores.duplicated(SORT).any()
    # mean and median fill only the numbers; mode and chained-linear fill all four columns
    expected = 2 * 2 * (2 * 2 + 2 * 4)
    assert len(scores) == expected
    numeric = scores["column"].isin(["transit_h", "temp_c"])
    assert scores.loc[numeric, "nrmse"].notna().all()
    assert scores.loc[numeric, "pfc"].isna().all()
    assert scores.loc[~numeric, "pfc"].notna().all()
    np.testing.assert_allclose(scores.loc[~numeric, "pfc"], 1 - scores.loc[~numeric, "accuracy"])
    assert set(result.seconds) == set(CHEAP)
    assert result.failures == []


def test_every_method_sees_the_same_hidden_cells(monkeypatch):
    working = trip_working()
    spy = Spy(KINDS)
    monkeypatch.setattr(experiment, "get_method", spy)
    result = run_experiment(working, KINDS, list(KINDS), methods=CHEAP,
                            masks=("mcar", "mnar"), repeats=2, seed=5)
    # one task per (mask, repeat, method), run in that order with one job
    assert len(spy.seen) == 2 * 2 * len(CHEAP)
    by_draw = [spy.seen[i:i + len(CHEAP)] for i in range(0, len(spy.seen), len(CHEAP))]
    patterns = []
    for draw in by_draw:
        assert [name for name, _, _ in draw] == list(CHEAP)
        first = draw[0][1]
        for _, pattern, _ in draw[1:]:
            np.testing.assert_array_equal(pattern, first)
        patterns.append(first)
        # the hidden cells are observed cells only: every original hole is still a hole
        assert (first >= working[list(KINDS)].isna().to_numpy()).all()
    # fresh draws differ
    assert not np.array_equal(patterns[0], patterns[1])
    counts = result.scores.groupby(["column", "mask", "repeat"])["n_hidden"].nunique()
    assert (counts == 1).all()


def test_hidden_counts_match_the_scores_and_the_rate():
    working = trip_working()
    result = run_experiment(working, KINDS, list(KINDS), methods=CHEAP, masks=("mcar",),
                            repeats=1, rate=0.25)
    first = result.scores[result.scores["repeat"] == 0]
    for column, n_hidden in result.hidden["mcar"].items():
        observed = int(working[column].notna().sum())
        # round(rate * observed) cells, as the mask module documents
        assert n_hidden == round(0.25 * observed)
        assert set(first.loc[first["column"] == column, "n_hidden"]) == {n_hidden}


def test_results_do_not_depend_on_the_number_of_jobs():
    working = trip_working(n=160)
    methods = {**CHEAP, "chained-boosted": {"max_trees": 20, "n_sweeps": 1}}
    kwargs = dict(methods=methods, masks=("mcar", "mar"), repeats=2, seed=11)
    one = run_experiment(working, KINDS, list(KINDS), n_jobs=1, **kwargs)
    two = run_experiment(working, KINDS, list(KINDS), n_jobs=2, **kwargs)
    pd.testing.assert_frame_equal(sorted_scores(one), sorted_scores(two), check_exact=True)
    assert one.hidden == two.hidden
    assert one.skipped == two.skipped


def test_seeds_are_per_task_not_per_position_in_the_grid():
    # The boosted chain draws rows and features from its seed; if the seed followed the order
    # in which tasks are made or run, adding or reordering methods would change its scores.
    working = trip_working(n=160)
    boosted = {"chained-boosted": {"max_trees": 20, "n_sweeps": 1}}
    alone = run_experiment(working, KINDS, list(KINDS), methods=boosted, masks=("mcar",),
                           repeats=2, seed=3)
    crowd = run_experiment(working, KINDS, list(KINDS),
                           methods={**boosted, **dict(reversed(CHEAP.items()))},
                           masks=("mcar",), repeats=2, seed=3)
    mine = crowd.scores[crowd.scores["method"] == "chained-boosted"]
    pd.testing.assert_frame_equal(sorted_scores(alone), mine.sort_values(SORT)
                                  .reset_index(drop=True), check_exact=True)
    # and the seed does matter, so the comparison above could have failed
    other = run_experiment(working, KINDS, list(KINDS), methods=boosted, masks=("mcar",),
                           repeats=2, seed=4)
    assert not sorted_scores(other)["nrmse"].equals(sorted_scores(alone)["nrmse"])


def test_the_same_seed_gives_the_same_scores():
    working = trip_working()
    first = run_experiment(working, KINDS, list(KINDS), methods=CHEAP, masks=("mar",),
                           repeats=1, seed=9)
    again = run_experiment(working, KINDS, list(KINDS), methods=CHEAP, masks=("mar",),
                           repeats=1, seed=9)
    pd.testing.assert_frame_equal(first.scores, again.scores, check_exact=True)


def test_progress_is_reported_after_every_task():
    calls = []
    run_experiment(trip_working(), KINDS, list(KINDS), methods=CHEAP, masks=("mcar",),
                   repeats=2, progress=lambda done, total: calls.append((done, total)))
    assert calls == [(i, 2 * len(CHEAP)) for i in range(1, 2 * len(CHEAP) + 1)]


def test_the_working_frame_is_not_modified():
    working = trip_working()
    before = working.copy()
    run_experiment(working, KINDS, list(KINDS), methods=CHEAP, masks=("mcar",), repeats=1)
    pd.testing.assert_frame_equal(working, before, check_exact=True)


# ------------------------------------------------------------------ failures and skips


class ExplodingMedian(MedianFill):
    """A median fill that cannot fit (the stand-in for a method with a bug)."""

    def _fit(self, X, targets):
        raise ValueError("singular matrix in the median")


def test_a_method_that_raises_is_recorded_and_the_run_goes_on(monkeypatch):
    def patched(name, **params):
        return ExplodingMedian() if name == "median" else get_method(name, **params)

    monkeypatch.setattr(experiment, "get_method", patched)
    result = run_experiment(trip_working(), KINDS, list(KINDS), methods=CHEAP,
                            masks=("mcar", "mar"), repeats=2, seed=2)
    assert [(f["method"], f["mask"], f["repeat"]) for f in result.failures] == [
        ("median", "mcar", 0), ("median", "mcar", 1), ("median", "mar", 0), ("median", "mar", 1)]
    for failure in result.failures:
        assert failure["error"] == "ValueError: singular matrix in the median"
    methods = set(result.scores["method"])
    assert methods == {"mean", "mode", "chained-linear"}
    assert len(result.scores) == 2 * 2 * (2 + 4 + 4)
    assert result.seconds["median"] >= 0.0


def test_methods_that_cannot_fill_a_kind_are_skipped_with_a_reason():
    result = run_experiment(trip_working(), KINDS, list(KINDS), methods=CHEAP,
                            masks=("mcar",), repeats=1)
    assert result.skipped == {
        "door": {"mean": "mean does not fill binary columns",
                 "median": "median does not fill binary columns"},
        "depot": {"mean": "mean does not fill categorical columns",
                  "median": "median does not fill categorical columns"},
    }
    scored = set(zip(result.scores["column"], result.scores["method"], strict=True))
    for column, reasons in result.skipped.items():
        for method in reasons:
            assert (column, method) not in scored


def test_a_method_with_no_column_to_fill_runs_no_task():
    calls = []
    working = trip_working()[["door", "depot"]]
    result = run_experiment(working, {"door": "binary", "depot": "categorical"},
                            ["door", "depot"], methods={"mean": {}, "mode": {}},
                            masks=("mcar",), repeats=1,
                            progress=lambda done, total: calls.append(total))
    assert set(result.scores["method"]) == {"mode"}
    assert calls == [1]
    assert result.seconds["mean"] == 0.0


# --------------------------------------------------------------------------- seeds


def test_derive_seed_is_a_31_bit_integer_that_depends_on_every_part():
    # every combination the product derives: draws, tasks, the fill, the row sample
    parts = [(0,), (1,), (0, "mcar"), (0, "mar"), (0, "mcar", 1), (0, "mcar", 2),
             (0, "mcar", 0, "mean"), (0, "mcar", 0, "median"), (1, "mcar", 0, "mean"),
             (0, "mar", 0, "mean"), (0, "mcar", 1, "mean"), (0, "fill", "knn"),
             (1, "fill", "knn"), (0, "sample"), (1, "sample")]
    seeds = [derive_seed(*p) for p in parts]
    assert all(isinstance(s, int) and 0 <= s < 2**31 for s in seeds)
    assert len(set(seeds)) == len(seeds)
    assert derive_seed(1, 2) != derive_seed(2, 1)
    assert derive_seed(0, "mcar", 0, "mean") == derive_seed(0, "mcar", 0, "mean")


def test_derive_seed_separates_parts_that_concatenate_alike():
    assert derive_seed(0, "mcar", 0) != derive_seed(0, "mcar")
    assert derive_seed(0, 0) != derive_seed(0)
    assert derive_seed(2**32) != derive_seed(0, 1)


def test_a_negative_seed_is_refused_as_an_option():
    # numpy's SeedSequence takes no negative entropy; the option is checked up front.
    with pytest.raises(OptionError, match="`seed` must be a whole number of at least 0, got -1"):
        ScoreOptions(seed=-1).validate()


def test_derive_seed_is_the_same_in_a_fresh_interpreter():
    # Python salts str hashes per process (PYTHONHASHSEED, random unless set); a seed built
    # on hash() would change from run to run. A fresh interpreter must agree with this one.
    code = ("import json; from imputelab.score.experiment import derive_seed; "
            "print(json.dumps([derive_seed(0, 'mcar', 0, 'mean'), derive_seed(7, 'fill', "
            "'chained-boosted')]))")
    expected = [derive_seed(0, "mcar", 0, "mean"), derive_seed(7, "fill", "chained-boosted")]
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, env={"PYTHONHASHSEED": "12345", "PATH": ""})
    assert json.loads(out.stdout) == expected


# --------------------------------------------------------------- what is measured


def bivariate(n: int, rho: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    y = rho * x + math.sqrt(1 - rho**2) * rng.standard_normal(n)
    return x, y


def test_rmse_of_the_mean_fill_matches_scikit_learn(monkeypatch):
    working = trip_working()
    spy = Spy(["transit_h", "temp_c"])
    monkeypatch.setattr(experiment, "get_method", spy)
    result = run_experiment(working, KINDS, ["transit_h", "temp_c"], methods={"mean": {}},
                            masks=("mcar",), repeats=1, seed=4)
    (_, pattern, masked), = spy.seen
    # Reference: scikit-learn's SimpleImputer(strategy="mean") on the same masked columns,
    # scored with sklearn.metrics.mean_squared_error on the hidden cells.
    numbers = masked[["transit_h", "temp_c"]].to_numpy(float)
    filled = SimpleImputer(strategy="mean").fit_transform(numbers)
    hidden = pattern & working[["transit_h", "temp_c"]].notna().to_numpy()
    for j, column in enumerate(["transit_h", "temp_c"]):
        truth = working[column].to_numpy(float)[hidden[:, j]]
        rmse = math.sqrt(mean_squared_error(truth, filled[hidden[:, j], j]))
        row = result.scores[result.scores["column"] == column].iloc[0]
        assert row["n_hidden"] == hidden[:, j].sum()
        assert row["rmse"] == pytest.approx(rmse, rel=1e-12)
        # NRMSE divides by the standard deviation (ddof=0) of the column's observed values
        assert row["nrmse"] == pytest.approx(rmse / np.nanstd(working[column]), rel=1e-12)


def test_nrmse_of_the_mean_fill_is_about_one_and_a_model_beats_it():
    # Textbook: under MCAR the mean fill's error is the column's spread, so NRMSE ~ 1
    # (Oba et al. 2003, Bioinformatics 19(16), NRMSE definition). On correlated data the
    # regression fill approaches sqrt(1 - rho^2) (Anderson 2003, Thm 2.5.1).
    x, y = bivariate(2000, 0.8, seed=21)
    working = pd.DataFrame({"x": x, "y": y})
    kinds = {"x": "numeric", "y": "numeric"}
    result = run_experiment(working, kinds, ["x", "y"],
                            methods={"mean": {}, "chained-linear": {}},
                            masks=("mcar",), repeats=3, seed=0)
    means = result.scores.groupby(["method", "column"])["nrmse"].mean()
    for column in ("x", "y"):
        assert means["mean", column] == pytest.approx(1.0, abs=0.08)
        assert means["chained-linear", column] < means["mean", column] - 0.2


# ------------------------------------------------ Bayes-optimal check, end to end

RHO = 0.8
N_ROWS = 5000
RATE = 0.2


@pytest.fixture(scope="module")
def bivariate_csv(tmp_path_factory):
    """x complete, y with 20% MCAR holes, written as text the way an export would."""
    x, y = bivariate(N_ROWS, RHO, seed=2026)
    holes = np.random.default_rng(7).random(N_ROWS) < RATE
    y_text = np.array([f"{v:.5f}" for v in y], dtype=object)
    y_text[holes] = ""
    path = tmp_path_factory.mktemp("bayes") / "pairs.csv"
    pd.DataFrame({"x": [f"{v:.5f}" for v in x], "y": y_text}).to_csv(path, index=False)
    return path, x, y, holes


BAYES_METHODS = ["mean", "median", "knn", "chained-linear"]


def test_bayes_optimal_fill_is_found_and_scored_when_x_is_always_seen(bivariate_csv, tmp_path):
    # Conditional mean of a multivariate normal (Anderson 2003, An Introduction to
    # Multivariate Statistical Analysis, 3rd ed., Thm 2.5.1): E[y | x] = rho x, with error
    # variance 1 - rho^2, so no fill can beat NRMSE sqrt(1 - rho^2) = 0.6 at rho = 0.8, and
    # the mean fill scores ~1. x serves as a feature only (the target, --use-target), so it
    # is never hidden and every hidden y has its x.
    path, x, y, holes = bivariate_csv
    table = read_table(path)
    options = ScoreOptions(masks=("mcar",), repeats=3, methods=BAYES_METHODS,
                           survey=SurveyOptions(target="x"), use_target=True)
    plan, _, result = score_table(table, options)
    optimum = math.sqrt(1 - RHO**2)
    column = plan.columns["y"]
    assert column.action == "impute"
    chosen = column.scores[column.method]["nrmse"]
    assert column.method == "chained-linear" or chosen <= 1.05 * optimum
    assert column.scores["chained-linear"]["nrmse"] == pytest.approx(optimum, rel=0.05)
    assert column.scores["mean"]["nrmse"] == pytest.approx(1.0, abs=0.05)
    assert set(result.scores["column"]) == {"y"}

    # Fill the file with the plan (through its JSON form): the fills sit on E[y | x].
    loaded = Plan.load(plan.save(tmp_path / "plan.json"))
    loaded.columns["y"].method = "chained-linear"
    loaded.columns["y"].params = {}
    out, report = fill_table(table, loaded)
    assert report.filled == {"y": int(holes.sum())}
    filled = out["y"].to_numpy()[holes].astype(float)
    rms_from_optimum = math.sqrt(np.mean((filled - RHO * x[holes]) ** 2))
    assert rms_from_optimum < 0.05  # estimation error of the line only
    rmse = math.sqrt(np.mean((filled - y[holes]) ** 2))
    assert rmse / y[~holes].std() == pytest.approx(optimum, rel=0.05)


def test_bayes_optimal_nrmse_when_both_columns_are_scored(bivariate_csv):
    # When x is scored too, its cells are hidden independently (MCAR per column), so a share
    # RATE of the hidden y cells have no x either; for those the best fill is the mean (error
    # variance 1). Same theorem: expected best NRMSE is sqrt(s + (1 - s)(1 - rho^2)), s the
    # share of x missing in the fit. In the selection draws x also lacks its held-out cells
    # (RATE of them, and the draw's RATE of the rest): s = RATE + (1 - RATE) RATE. In the
    # held-out fit x lacks only its held-out cells: s = RATE.
    path, *_ = bivariate_csv
    options = ScoreOptions(masks=("mcar",), repeats=3, methods=BAYES_METHODS)
    plan, _, _ = score_table(read_table(path), options)
    share = RATE + (1 - RATE) * RATE
    best = math.sqrt(share + (1 - share) * (1 - RHO**2))
    column = plan.columns["y"]
    assert column.method == "chained-linear"
    assert column.scores["chained-linear"]["nrmse"] == pytest.approx(best, rel=0.05)
    assert column.scores["mean"]["nrmse"] == pytest.approx(1.0, abs=0.05)
    held_out_best = math.sqrt(RATE + (1 - RATE) * (1 - RHO**2))
    assert column.expected_error["score"] == pytest.approx(held_out_best, rel=0.1)


# ---------------------------------------------------------------------- held-out cells


def test_held_out_cells_are_never_hidden_and_missing_in_every_selection_fit(monkeypatch):
    working = trip_working()
    columns = list(KINDS)
    masks, repeats = ("mcar", "mnar"), 2
    held = draw_held_out(working, columns, masks, 0.2, seed=3)
    # Without the held-out set, the selection draws would hide some of its cells: the checks
    # below are not empty.
    plain = experiment.draw_hidden(working, columns, masks, 0.2, repeats, 3)
    assert any((hidden & held[mask]).any() for mask, _, hidden in plain)
    spy = Spy(KINDS)
    monkeypatch.setattr(experiment, "get_method", spy)
    result = run_experiment(working, KINDS, columns, methods=CHEAP, masks=masks,
                            repeats=repeats, seed=3, held_out=held)
    for mask, _, hidden in result.draws:
        assert held[mask].any()
        assert not (hidden & held[mask]).any()
        assert hidden.any()
    # one task per (mask, repeat, method), in that order with one job: every fit of a mask's
    # draws has that mask's held-out cells missing (never training data)
    assert len(spy.seen) == len(masks) * repeats * len(CHEAP)
    per_mask = repeats * len(CHEAP)
    for i, (_, pattern, _) in enumerate(spy.seen):
        assert pattern[held[masks[i // per_mask]]].all()


def test_held_out_fits_see_only_the_held_out_cells_missing(monkeypatch):
    working = trip_working()
    columns = list(KINDS)
    held = draw_held_out(working, columns, ("mcar",), 0.2, seed=4)
    spy = Spy(KINDS)
    monkeypatch.setattr(experiment, "get_method", spy)
    found = expected_errors(working, KINDS, columns, held,
                            {"transit_h": ("chained-linear", {}), "temp_c": ("mean", {}),
                             "depot": ("mode", {})},
                            {"transit_h": "nrmse", "temp_c": "nrmse", "depot": "pfc"}, seed=4)
    assert [name for name, _, _ in spy.seen] == ["chained-linear", "mean", "mode"]
    for _, pattern, _ in spy.seen:
        np.testing.assert_array_equal(pattern, held["mcar"] | working[columns].isna().to_numpy())
    # NRMSE of the mean fill on the held-out cells, recomputed with scikit-learn's
    # SimpleImputer (mean of the observed cells) and mean_squared_error, divided by the
    # observed values' standard deviation (ddof=0)
    j = columns.index("temp_c")
    train = working["temp_c"].to_numpy(float).copy()
    cells = held["mcar"][:, j]
    truth = train[cells]
    train[cells] = np.nan
    guess = SimpleImputer(strategy="mean").fit(train.reshape(-1, 1)).statistics_[0]
    want = math.sqrt(mean_squared_error(truth, np.full(len(truth), guess)))
    want /= np.nanstd(working["temp_c"].to_numpy(float))
    assert found["temp_c"] == {"metric": "nrmse", "score": pytest.approx(want), "se": None,
                               "draws": 1}
    assert found["depot"]["metric"] == "pfc" and 0 <= found["depot"]["score"] <= 1


def test_the_plan_quotes_the_held_out_error_and_fixed_seeds_give_the_same_bytes(
        bivariate_csv, tmp_path):
    path, *_ = bivariate_csv
    options = ScoreOptions(masks=("mcar", "mar"), repeats=2, methods=["mean", "chained-linear"])
    first, _, _ = score_table(read_table(path), options)
    second, _, _ = score_table(read_table(path), options)
    assert first.to_json() == second.to_json()
    column = first.columns["y"]
    error = column.expected_error
    assert error["metric"] == "nrmse" and error["draws"] == 2 and error["se"] is not None
    assert f"Held-out expected error: nrmse {error['score']:.3g}" in column.reason
    assert "selection scores over 4 masked draws" in column.reason
    # Same theorem as above: no fill beats sqrt(RATE + (1 - RATE)(1 - rho^2)) in
    # expectation; a held-out figure far below it would mean the truth leaked.
    assert error["score"] > 0.8 * math.sqrt(RATE + (1 - RATE) * (1 - RHO**2))
    loaded = Plan.load(first.save(tmp_path / "plan.json"))
    again = loaded.columns["y"].expected_error
    assert again["metric"] == "nrmse" and again["draws"] == 2
    assert again["score"] == pytest.approx(error["score"], rel=1e-5)
    data = json.loads(first.to_json())
    data["version"] = 2
    for col in data["columns"].values():
        del col["expected_error"]
        col.pop("structural", None)
    assert Plan.from_dict(data).columns["y"].expected_error is None


# --------------------------------------------------------------------- structural blanks


@pytest.fixture(scope="module")
def garage_csv(tmp_path_factory):
    """Houses: no garage (area 0) leaves the garage's year and finish blank; a few years are
    also lost at random among houses that have a garage."""
    rng = np.random.default_rng(11)
    n = 300
    built = rng.integers(1900, 2000, n)
    area = np.where(rng.random(n) < 0.2, 0, rng.integers(200, 900, n))
    year = np.minimum(built + rng.integers(0, 11, n), 2010).astype(float)
    finish = rng.choice(["rough", "finished"], n).astype(object)
    none = area == 0
    year[none] = np.nan
    finish[none] = None
    lost = np.flatnonzero(~none)[rng.choice((~none).sum(), 12, replace=False)]
    year[lost] = np.nan
    frame = pd.DataFrame({"built": built, "garage_area": area,
                          "garage_year": pd.array(year, dtype="Int64"),
                          "garage_finish": finish})
    path = tmp_path_factory.mktemp("garage") / "houses.csv"
    frame.to_csv(path, index=False)
    return path, frame, none, lost


def test_a_structural_number_stands_outside_the_observed_range_and_other_blanks_are_modelled(
        garage_csv, tmp_path):
    path, frame, none, lost = garage_csv
    table = read_table(path)
    options = ScoreOptions(masks=("mcar",), repeats=2, methods=["median", "chained-linear"])
    plan, _, _ = score_table(table, options)
    col = plan.columns["garage_year"]
    low = float(frame["garage_year"].min())
    # the experiment's choice is kept; the rule and its stand-in are recorded beside it
    assert col.method in ("median", "chained-linear")
    assert col.structural == {"when": "garage_area == 0", "other": "garage_area", "op": "==",
                              "values": [0], "value": low - 1}
    assert col.indicator
    assert col.reason.startswith("structural blank: blank when garage_area == 0")
    assert f"fill writes {low - 1:g}, one unit (1) below the smallest observed value" in \
        col.reason
    assert "12 blank(s) outside the rule" in col.reason
    labels = plan.columns["garage_finish"]
    assert labels.structural["value"] == "absent"
    # Fill through the plan's JSON form.
    loaded = Plan.load(plan.save(tmp_path / "plan.json"))
    loaded.columns["garage_year"].method, loaded.columns["garage_year"].params = \
        "chained-linear", {}
    out, _ = fill_table(table, loaded, text_output=False)
    years = out["garage_year"].to_numpy(float)
    assert (years[none] == low - 1).all()  # the stand-in exactly where the rule holds
    # the blanks outside the rule get the model's fill: inside the observed range and close
    # to the house's own year (the year is built + 0..10 by construction)
    assert (years[lost] >= low).all() and (years[lost] != low - 1).all()
    assert np.abs(years[lost] - (frame["built"].to_numpy()[lost] + 5)).max() < 15
    observed = frame["garage_year"].notna().to_numpy()
    np.testing.assert_array_equal(years[observed],
                                  frame["garage_year"].to_numpy(float)[observed])
    assert (out["garage_finish"][none] == "absent").all()
    assert (out["garage_finish"][~none] != "absent").all()
    assert out.columns[-1] == "garage_year__was_missing"


def test_zero_stands_in_when_it_is_within_or_next_to_the_observed_range():
    spec = ColumnSpec(kind="numeric", integer=True)
    assert _structural_value("numeric", pd.Series([160.0, 900.0, 1488.0]), spec)[0] == 0.0
    assert _structural_value("numeric", pd.Series([-25.0, 5.0]), spec)[0] == 0.0
    value, words = _structural_value("numeric", pd.Series([1900.0, 1950.0, 2010.0]), spec)
    assert value == 1899.0 and "outside every observed value" in words
    tenths = ColumnSpec(kind="numeric", decimals=1)
    assert _structural_value("numeric", pd.Series([12.5, 14.0]), tenths)[0] == 12.4
