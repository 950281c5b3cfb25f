"""The blend method: convex weights, fitted only on cells it is not scored on."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import nnls
from threadpoolctl import threadpool_limits

from imputelab.methods import get_method
from imputelab.methods.blend import COMPONENTS, blend_weights, fit_blend, simplex_grid
from imputelab.score.experiment import _crossfit_blend, run_experiment


def test_simplex_grid_is_the_whole_simplex() -> None:
    grid = simplex_grid(3, 0.1)
    # (n + 2 choose 2) points for n = 10 steps: 66
    assert grid.shape == (66, 3)
    np.testing.assert_allclose(grid.sum(axis=1), 1.0)
    assert (grid >= 0).all()
    assert {tuple(p) for p in np.eye(3)} <= {tuple(p) for p in grid}


def test_weights_minimise_the_quadratic_loss_like_the_closed_form() -> None:
    # Independent errors of variances d_k: the convex minimiser of w' diag(d) w is
    # w_k proportional to 1/d_k (Lagrange multipliers; e.g. Bates & Granger 1969, Oper. Res.
    # Q. 20:451-468, for combined forecasts).
    d = np.array([1.0, 2.0, 4.0])
    weights = blend_weights(np.diag(d))
    np.testing.assert_allclose(weights, (1 / d) / (1 / d).sum(), atol=0.02)
    assert weights.sum() == pytest.approx(1.0)


@pytest.mark.parametrize("seed", range(5))
def test_weights_are_convex_and_beat_every_component(seed: int) -> None:
    rng = np.random.default_rng(seed)
    errors = rng.normal(size=(200, 3)) * [1.0, 1.3, 0.8] + rng.normal(size=(200, 1))
    gram = errors.T @ errors
    weights = blend_weights(gram)
    assert (weights >= 0).all() and weights.sum() == pytest.approx(1.0)
    loss = weights @ gram @ weights
    assert loss <= gram.diagonal().min() + 1e-9  # each component is a vertex of the grid


def test_labels_come_from_the_component_with_fewest_wrong_labels() -> None:
    truth = {"door": np.array(["a", "b", "a", "b"], dtype=object)}
    guesses = {"door": {"chained-linear": ["b", "b", "b", "b"],
                        "chained-forest": ["a", "b", "a", "a"],
                        "chained-boosted": ["a", "a", "a", "a"]}}
    weights, labels = fit_blend(truth, guesses, scales={})
    assert labels == "chained-forest"
    assert sum(weights.values()) == pytest.approx(1.0)


def _frame(n: int = 240, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    return pd.DataFrame({
        "x": x,
        "y": 2 * x + rng.normal(scale=0.5, size=n),
        "z": np.sin(2 * x) + rng.normal(scale=0.3, size=n),
        "g": pd.Categorical(np.where(x + rng.normal(scale=0.5, size=n) > 0, "hi", "lo")),
    })


def test_crossfit_never_uses_the_scored_draws_hidden_values() -> None:
    # Draw r's weights come from the other draws' cells that r does not hide: changing the
    # true values of r's hidden cells (the fills being given) cannot move them.
    frame = _frame()
    columns = list(frame.columns)
    rng = np.random.default_rng(1)
    draws = [("mcar", r, rng.random((len(frame), len(columns))) < 0.2) for r in range(3)]
    fills = {}
    for mask, r, hidden in draws:
        fills[(mask, r)] = {}
        for k, m in enumerate(COMPONENTS):
            per = {}
            for j, name in enumerate(columns):
                rows = hidden[:, j]
                if name == "g":
                    per[name] = frame[name].astype(object).to_numpy()[rows]
                else:
                    per[name] = frame[name].to_numpy()[rows] + rng.normal(scale=0.2 * (k + 1),
                                                                          size=rows.sum())
            fills[(mask, r)][m] = per
    scales = {n: float(frame[n].std(ddof=0)) for n in ["x", "y", "z"]}
    before = _crossfit_blend(frame, columns, scales, draws, fills, columns)
    changed = frame.copy()
    hidden0 = draws[0][2]
    for j, name in enumerate(["x", "y", "z"]):
        values = changed[name].to_numpy().copy()
        values[hidden0[:, j]] += 100.0
        changed[name] = values
    after = _crossfit_blend(changed, columns, scales, draws, fills, columns)
    assert after["draws"]["mcar/0"] == before["draws"]["mcar/0"]
    assert after["weights"] != before["weights"]  # the plan's weights do use every draw
    # the least noisy component (linear here) gets the most weight
    assert max(before["weights"], key=before["weights"].get) == "chained-linear"


def test_crossfit_weights_never_use_held_out_values() -> None:
    # Held-out cells are empty in every draw's fit and never hidden by a draw: their truth
    # can change without moving any weight, the plan's included.
    frame = _frame()
    columns = list(frame.columns)
    kinds = {n: "categorical" if n == "g" else "numeric" for n in frame.columns}
    rng = np.random.default_rng(2)
    held = {"mcar": rng.random((len(frame), len(columns))) < 0.2}
    methods = {m: {} for m in [*COMPONENTS, "blend"]}
    with threadpool_limits(limits=1):
        result = run_experiment(frame, kinds, columns, methods=methods, masks=["mcar"],
                                repeats=2, seed=0, held_out=held, keep_fills=True)
    changed = frame.copy()
    for j, name in enumerate(["x", "y", "z"]):
        values = changed[name].to_numpy().copy()
        values[held["mcar"][:, j]] += 100.0
        changed[name] = values
    scales = {n: float(frame[n].std(ddof=0)) for n in ["x", "y", "z"]}
    fills = {k: {m: v[m] for m in COMPONENTS} for k, v in result.fills.items()}
    before = _crossfit_blend(frame, columns, scales, result.draws, fills, columns, held)
    after = _crossfit_blend(changed, columns, scales, result.draws, fills, columns, held)
    assert after == before
    assert before["weights"] == result.blend["weights"]


def test_blend_in_the_experiment_costs_no_fit_and_scores_every_draw() -> None:
    frame = _frame()
    methods = {m: {} for m in [*COMPONENTS, "blend"]}
    kinds = {n: "categorical" if n == "g" else "numeric" for n in frame.columns}
    with threadpool_limits(limits=1):
        result = run_experiment(frame, kinds, list(frame.columns), methods=methods,
                                masks=["mcar"], repeats=3, seed=0)
    blend = result.scores[result.scores["method"] == "blend"]
    assert len(blend) == 3 * 4  # 3 draws x 4 columns
    assert set(result.blend["draws"]) == {"mcar/0", "mcar/1", "mcar/2"}
    weights = result.blend["weights"]
    assert sum(weights.values()) == pytest.approx(1.0)
    assert min(weights.values()) >= 0


def test_the_experiments_blend_is_the_convex_combination_of_its_components_fills() -> None:
    frame = _frame()
    methods = {m: {} for m in [*COMPONENTS, "blend"]}
    kinds = {n: "categorical" if n == "g" else "numeric" for n in frame.columns}
    columns = list(frame.columns)
    with threadpool_limits(limits=1):
        result = run_experiment(frame, kinds, columns, methods=methods, masks=["mcar"],
                                repeats=2, seed=3, keep_fills=True)
    scores = result.scores.set_index(["column", "method", "repeat"])
    for mask, repeat, hidden in result.draws:
        entry = result.blend["draws"][f"{mask}/{repeat}"]
        w = np.array([entry["weights"][m] for m in COMPONENTS])
        # a convex combination: non-negative weights summing to one
        assert (w >= 0).all() and w.sum() == pytest.approx(1.0)
        fills = result.fills[(mask, repeat)]
        for j, name in enumerate(["x", "y", "z"]):
            parts = np.column_stack([fills[m][name] for m in COMPONENTS])
            np.testing.assert_allclose(fills["blend"][name], parts @ w)
            # the blend's NRMSE recomputed with numpy on the draw's hidden cells: RMSE over
            # the standard deviation (ddof=0) of the observed values
            empty = hidden[:, j] | frame[name].isna().to_numpy()
            guess = (parts @ w)[hidden[empty, j]]
            truth = frame[name].to_numpy()[hidden[:, j]]
            want = np.sqrt(np.mean((guess - truth) ** 2)) / np.nanstd(frame[name].to_numpy())
            assert scores.loc[(name, "blend", repeat), "nrmse"] == pytest.approx(want)


def test_blend_weights_agree_with_non_negative_least_squares_on_the_simplex() -> None:
    # Lawson & Hanson (1974), Solving Least Squares Problems, ch. 23: the NNLS algorithm, as
    # scipy.optimize.nnls implements it. The sum-to-one constraint is added as one heavily
    # weighted row of ones (weighting for equality constraints, Lawson & Hanson ch. 22, from
    # memory). With sum(w) = 1 the blend's error is F w - t, so both minimise the same loss.
    rng = np.random.default_rng(7)
    truth = rng.normal(size=400)
    guesses = {"chained-linear": truth + rng.normal(scale=0.6, size=400),
               "chained-forest": truth + rng.normal(scale=0.4, size=400),
               "chained-boosted": 0.5 * truth + rng.normal(scale=0.5, size=400)}
    weights, _ = fit_blend({"c": truth}, {"c": guesses}, {"c": float(truth.std())})
    F = np.column_stack([guesses[m] for m in COMPONENTS])
    big = 1e4
    A = np.vstack([F, big * np.ones((1, 3))])
    b = np.concatenate([truth, [big]])
    reference, _ = nnls(A, b)
    got = np.array([weights[m] for m in COMPONENTS])
    assert got.sum() == pytest.approx(1.0) and (got >= 0).all()
    np.testing.assert_allclose(got, reference, atol=0.02)  # the grid's step
    assert reference[0] > 0 and reference[1] > 0  # a real mixture, not a corner


def test_self_contained_blend_keeps_observed_cells_and_saves_its_weights() -> None:
    frame = _frame(seed=2)
    holes = np.random.default_rng(3).random(frame.shape) < 0.15
    masked = frame.mask(holes)
    with threadpool_limits(limits=1):
        method = get_method("blend", random_state=0)
        filled = method.fit_transform(masked, list(frame.columns))
    assert filled.notna().all().all()
    kept = ~holes[:, 0]
    np.testing.assert_array_equal(filled["x"].to_numpy()[kept], frame["x"].to_numpy()[kept])
    assert sum(method.weights_.values()) == pytest.approx(1.0)
    assert method.label_method_ in COMPONENTS
    state = method._export_state()
    again = get_method("blend")._import_state(state)
    pd.testing.assert_frame_equal(again.transform(masked), method.transform(masked))


def test_given_weights_must_be_convex() -> None:
    frame = _frame(n=60)
    with pytest.raises(ValueError, match="summing to 1"):
        get_method("blend", weights={"chained-linear": 0.7, "chained-forest": 0.7}).fit(
            frame.mask(np.random.default_rng(0).random(frame.shape) < 0.1))
