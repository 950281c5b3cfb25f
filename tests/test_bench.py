"""The benchmark: a tiny run end to end, the Bayes floor, and its bad options."""

from __future__ import annotations

import json

import numpy as np
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


def test_tiny_bench_runs_end_to_end(tmp_path) -> None:
    out = tmp_path / "bench"
    result = ok(invoke("bench", "--datasets", "airquality", "--masks", "mcar", "--repeats", 1,
                       "--selection-repeats", 1, "--jobs", 1, "--json", "--out", out))
    data = json.loads((out / "results.json").read_text())
    printed = json.loads(result.stdout)  # --json: the same results on stdout, nothing else
    assert printed["datasets"] == data["datasets"]
    summary = data["datasets"]["airquality"]["masks"]["mcar"]
    methods = summary["methods"]
    assert set(REFERENCES) <= set(methods) and PLAN in methods and "blend" in methods
    best = summary["best_reference_nrmse"]
    assert methods[PLAN]["nrmse_ratio"] == pytest.approx(
        methods[PLAN]["nrmse"] / methods[best]["nrmse"], rel=1e-4)
    # Mean fill under MCAR scores about 1 (NRMSE: Oba et al. 2003); 111 rows, loose bounds.
    assert 0.7 < methods["sk-simple"]["nrmse"] < 1.4
    assert methods["sk-simple"]["nrmse"] == pytest.approx(methods["mean"]["nrmse"], rel=0.02)
    assert methods["sk-iter-forest"]["seconds_ratio"] == pytest.approx(1.0)
    assert BAYES not in methods
    assert (out / "results.md").read_text().startswith("# Benchmark")
    svg = (out / "ratios.svg").read_text()
    assert svg.startswith("<svg") and 'xmlns="http://www.w3.org/2000/svg"' in svg
    assert "<title>NRMSE of each method" in svg


@pytest.mark.parametrize("args, words", [
    (["--datasets", "nope"], "--datasets: unknown dataset 'nope'"),
    (["--masks", "pattern"], "--masks: 'pattern'"),
    (["--repeats", "0"], "--repeats must be at least 1"),
    (["--rate", "1.5"], "--rate must be strictly between 0 and 1"),
    (["--max-rows", "10"], "--max-rows must be at least 50"),
])
def test_bad_options_exit_2_with_one_line(tmp_path, args, words) -> None:
    result = invoke("bench", *args, "--out", tmp_path / "o")
    assert result.exit_code == 2
    assert words in result.output
    assert len(result.output.strip().splitlines()) == 1
    assert not (tmp_path / "o").exists()
