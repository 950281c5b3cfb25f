"""``blend``: a convex combination of the chained linear, forest and boosted fills (stacking).

Stacked generalisation (Wolpert 1992, *Neural Networks* 5(2):241-259; Breiman 1996, "Stacked
regressions", *Machine Learning* 24:49-64, who found non-negative weights summing to one the
reliable form): the number put in a hole is ``w_linear * linear + w_forest * forest +
w_boosted * boosted`` with ``w >= 0`` and ``sum(w) = 1``, one weight vector for the whole
table. The weights minimise the mean over numeric columns of the squared error on hidden cells
divided by the column's variance (the mean NRMSE squared), found by a grid over the simplex.

Where the weights come from:

- given as ``weights`` (the experiment fits them on masked cells of other draws and the plan
  stores them), the method only fits the components and combines them;
- otherwise ``fit`` hides a share of the observed cells of its own (``selection_rate``), fits
  the components on that copy, chooses the weights on the hidden cells, then fits the
  components on the whole table. Cells missing in ``X`` (a caller's hidden cells) are never
  among them, so it never sees a cell it is later scored on.

What the experiment's cross-fitting guarantees, exactly: draw ``r`` is scored with weights
fitted on the other draws' hidden cells, leaving out every cell ``r`` hides, so no value of
``r``'s hidden cells is a cell its weights are fitted on. It does *not* keep those values out
entirely: a draw hides only its own cells, so ``r``'s hidden cells were training data of the
other draws' component models, and through those models' fills they reach ``r``'s weights
indirectly. A blend's selection score is therefore not a clean out-of-sample figure (the
effect is small: three weights fitted on many cells), and it is not what a plan quotes as the
blend's error. The plan's ``expected_error`` is clean: its held-out cells are missing in every
selection fit (no component model trains on them), are never a weight-fitting cell, and score
the blend refitted with the plan's weights (:mod:`imputelab.score.heldout`).

Label columns: the components give labels, not blended probabilities, so a label column takes
the fill of one component, the one with the fewest wrong labels on the selection cells
(``label_method``).
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from sklearn.utils import check_random_state

from imputelab.executors.seeds import derive_seed
from imputelab.frame.encoding import is_categorical
from imputelab.methods.base import FillMethod
from imputelab.methods.chained import ChainedBoostedFill, ChainedForestFill, ChainedLinearFill

__all__ = ["COMPONENTS", "BlendFill", "blend_weights", "simplex_grid"]

#: The blended methods, in the order of a weight vector.
COMPONENTS: dict[str, type[FillMethod]] = {
    "chained-linear": ChainedLinearFill,
    "chained-forest": ChainedForestFill,
    "chained-boosted": ChainedBoostedFill,
}


def simplex_grid(k: int, step: float = 0.02) -> np.ndarray:
    """Every weight vector of ``k`` non-negative multiples of ``step`` summing to one."""
    n = int(round(1 / step))
    heads = [c for c in itertools.product(range(n + 1), repeat=k - 1) if sum(c) <= n]
    return np.array([[*c, n - sum(c)] for c in heads], dtype=float) / n


def blend_weights(gram: np.ndarray, step: float = 0.02) -> np.ndarray:
    """The convex weights minimising ``w' G w`` over a grid on the simplex.

    Parameters
    ----------
    gram : ndarray, shape (k, k)
        Sum over columns of ``E' E / (n * scale**2)``, ``E`` the hidden cells' errors of the
        ``k`` components (one column each).
    step : float
        Grid spacing.

    Returns
    -------
    ndarray, shape (k,)
        Non-negative, summing to one; ties go to the first grid point (more weight to the
        earlier, simpler components).
    """
    grid = simplex_grid(gram.shape[0], step)
    loss = np.einsum("mi,ij,mj->m", grid, gram, grid)
    return grid[int(np.argmin(loss))]


class BlendFill(FillMethod):
    """Convex blend of chained-linear, chained-forest and chained-boosted fills.

    Parameters
    ----------
    weights : dict, optional
        ``{component: weight}``, non-negative and summing to one; fitted on selection cells
        when not given.
    label_method : str, optional
        The component whose fill label columns take; chosen on the selection cells when not
        given.
    selection_rate : float, default=0.1
        Share of each target column's observed cells hidden to fit the weights (only when
        ``weights`` is not given).
    random_state : int, optional
    """

    name = "blend"
    simplicity = 6
    max_labels = 50
    source = ("stacked generalisation: Wolpert (1992), Neural Networks 5(2):241-259; "
              "convex weights: Breiman (1996), Machine Learning 24:49-64")

    def __init__(self, weights: Mapping[str, float] | None = None,
                 label_method: str | None = None, selection_rate: float = 0.1,
                 random_state=None):
        self.weights = weights
        self.label_method = label_method
        self.selection_rate = selection_rate
        self.random_state = random_state

    # -- fitting -----------------------------------------------------------------------------
    def _check(self) -> None:
        if self.weights is not None:
            unknown = sorted(set(self.weights) - set(COMPONENTS))
            values = np.array([float(v) for v in self.weights.values()])
            if unknown or not len(values) or (values < 0).any() or (
                    abs(values.sum() - 1.0) > 1e-6):
                raise ValueError(f"weights must map {', '.join(COMPONENTS)} to non-negative "
                                 f"numbers summing to 1, got {dict(self.weights)!r}")
        if self.label_method is not None and self.label_method not in COMPONENTS:
            raise ValueError(f"label_method must be one of {', '.join(COMPONENTS)}, got "
                             f"{self.label_method!r}")
        if not 0.0 < self.selection_rate < 1.0:
            raise ValueError(f"selection_rate must be strictly between 0 and 1, got "
                             f"{self.selection_rate!r}")

    def _components(self, base: int, needed: Sequence[str]) -> dict[str, FillMethod]:
        return {name: COMPONENTS[name](random_state=derive_seed(base, name)) for name in needed}

    def _select(self, X: pd.DataFrame, targets: list[str], base: int) -> tuple[dict, str | None]:
        """Weights and label component from cells hidden here (never the caller's cells)."""
        rng = np.random.default_rng(derive_seed(base, "selection"))
        masked, hidden = X.copy(), {}
        for name in targets:
            observed = np.flatnonzero(X[name].notna().to_numpy())
            n = int(round(self.selection_rate * len(observed)))
            if n < 1 or len(observed) - n < 2:
                continue
            rows = np.sort(rng.choice(observed, n, replace=False))
            column = masked[name].copy()
            column.iloc[rows] = np.nan
            masked[name] = column
            hidden[name] = rows
        fills = {name: method.fit_transform(masked, targets)
                 for name, method in self._components(derive_seed(base, "select"),
                                                      list(COMPONENTS)).items()}
        truth = {name: X[name].iloc[rows] for name, rows in hidden.items()}
        guesses = {name: {m: fills[m][name].iloc[rows] for m in fills}
                   for name, rows in hidden.items()}
        scales = {name: float(np.nanstd(X[name].to_numpy(float)))
                  for name in hidden if not is_categorical(X[name])}
        return fit_blend(truth, guesses, scales)

    def _fit(self, X: pd.DataFrame, targets: list[str]) -> None:
        self._check()
        base = int(check_random_state(self.random_state).randint(0, 2**31 - 1))
        if self.weights is None:
            weights, labels = self._select(X, targets, base)
        else:
            weights, labels = dict(self.weights), self.label_method
        labelled = [n for n in targets if is_categorical(X[n])]
        if labelled and labels is None:
            labels = max(weights, key=weights.get)
        self.weights_ = {m: float(weights.get(m, 0.0)) for m in COMPONENTS}
        self.label_method_ = labels if labelled else None
        needed = [m for m in COMPONENTS if self.weights_[m] > 0 or m == self.label_method_]
        self.components_ = self._components(base, needed)
        self._fill = {name: method.fit_transform(X, targets)
                      for name, method in self.components_.items()}

    def _combine(self, X: pd.DataFrame, fills: Mapping[str, pd.DataFrame]) -> pd.DataFrame:
        out = X.copy()
        for name in self.targets_:
            if is_categorical(X[name]):
                out[name] = fills[self.label_method_][name]
            else:
                out[name] = sum(self.weights_[m] * fills[m][name].to_numpy(float)
                                for m in fills if self.weights_[m] > 0)
        return out

    def _transform(self, X: pd.DataFrame) -> pd.DataFrame:
        return self._combine(X, {m: c.transform(X) for m, c in self.components_.items()})

    def fit(self, X: pd.DataFrame, targets=None) -> BlendFill:
        """Fit the components (and, without given weights, the weights); see FillMethod.fit."""
        super().fit(X, targets)
        self._fill = None
        return self

    def fit_transform(self, X: pd.DataFrame, targets=None) -> pd.DataFrame:
        """Fit on ``X`` and fill it from the components' own training fills."""
        super().fit(X, targets)
        fills, self._fill = self._fill, None
        return self._keep_observed(X, self._combine(X, fills))

    # -- saved models ------------------------------------------------------------------------
    def _export_state(self) -> dict[str, Any]:
        return {**super()._export_state(), "weights": dict(self.weights_),
                "label_method": self.label_method_,
                "components": {m: {"params": c.get_params(), "state": c._export_state()}
                               for m, c in self.components_.items()}}

    def _import_state(self, state: dict[str, Any]) -> BlendFill:
        super()._import_state(state)
        self.weights_ = {m: float(state["weights"].get(m, 0.0)) for m in COMPONENTS}
        self.label_method_ = state["label_method"]
        self.components_ = {}
        for name, part in state["components"].items():
            if name not in COMPONENTS:
                raise ValueError(f"blend: unknown component '{name}' in the saved model")
            self.components_[name] = COMPONENTS[name](**part["params"])._import_state(
                part["state"])
        self._fill = None
        return self


def fit_blend(truth: Mapping[str, pd.Series | np.ndarray],
              guesses: Mapping[str, Mapping[str, Any]],
              scales: Mapping[str, float]) -> tuple[dict[str, float], str | None]:
    """Blend weights and label component from hidden cells' truth and component fills.

    Parameters
    ----------
    truth : mapping
        ``{column: hidden values}``; a column in ``scales`` is numeric, any other holds labels.
    guesses : mapping
        ``{column: {component: fills of the same cells}}``.
    scales : mapping
        Standard deviation of each numeric column.

    Returns
    -------
    weights : dict
        ``{component: weight}`` over :data:`COMPONENTS`.
    label_method : str or None
        The component with the lowest mean share of wrong labels, or None without label
        columns.
    """
    names = list(COMPONENTS)
    gram = np.zeros((len(names), len(names)))
    wrong = np.zeros(len(names))
    n_label = 0
    for column, values in truth.items():
        if column in scales:
            scale = scales[column]
            if not np.isfinite(scale) or scale <= 0 or not len(values):
                continue
            errors = np.column_stack([np.asarray(guesses[column][m], float) for m in names])
            errors = errors - np.asarray(values, float)[:, None]
            gram += errors.T @ errors / (len(values) * scale**2)
        elif len(values):
            true = np.asarray(values, dtype=object)
            wrong += [np.mean(np.asarray(guesses[column][m], dtype=object) != true)
                      for m in names]
            n_label += 1
    weights = blend_weights(gram) if gram.any() else np.full(len(names), 1 / len(names))
    labels = names[int(np.argmin(wrong))] if n_label else None
    return dict(zip(names, (float(w) for w in weights), strict=True)), labels
