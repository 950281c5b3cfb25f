"""The benchmark's yardsticks: scikit-learn's imputers on a numeric design, and the Bayes floor.

The references see a numeric design: numbers standardised with the masked table's observed
mean and standard deviation, labels one-hot (a hole is a row of NaN over its block; the fill
is the label of the largest filled dummy) or, for :data:`ORDINAL` references, one column of
integer codes; ``sk-simple`` takes the mean of numbers and the most frequent label. The Bayes
floor is the conditional mean of the hidden entries of a normal with known parameters.
"""

from __future__ import annotations

import time
import warnings
from typing import Any

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from imputelab.errors import OptionError
from imputelab.frame.encoding import is_categorical

__all__ = ["ORDINAL", "REFERENCES", "SPEED_REFERENCE", "bayes_floor_fill"]
#: scikit-learn references, by the name the report gives them.
REFERENCES = {
    "sk-simple": "SimpleImputer(mean; most_frequent for labels)",
    "sk-knn": "KNNImputer(n_neighbors=5) on standardised numbers and one-hot labels",
    "sk-iter-bayes": "IterativeImputer(BayesianRidge())",
    "sk-iter-forest": "IterativeImputer(RandomForestRegressor(n_estimators=100))",
}
SPEED_REFERENCE = "sk-iter-forest"
#: References that see a label column as one column of integer codes (the most frequent code
#: for the simple one; trees split codes as they split numbers, and one column instead of a
#: block of dummies keeps the forest reference's cost down). The others see one-hot blocks.
ORDINAL = ("sk-simple", "sk-iter-forest")

def _reference(name: str, seed: int) -> Any:
    from sklearn.ensemble import RandomForestRegressor
    from sklearn.experimental import enable_iterative_imputer  # noqa: F401
    from sklearn.impute import IterativeImputer, KNNImputer, SimpleImputer
    from sklearn.linear_model import BayesianRidge

    if name == "sk-simple":
        return SimpleImputer(strategy="mean")
    if name == "sk-knn":
        return KNNImputer(n_neighbors=5)
    if name == "sk-iter-bayes":
        return IterativeImputer(BayesianRidge(), random_state=seed)
    if name == "sk-iter-forest":
        return IterativeImputer(RandomForestRegressor(n_estimators=100, random_state=seed,
                                                      n_jobs=1), random_state=seed)
    raise OptionError(f"unknown reference '{name}'")


def reference_fill(working: pd.DataFrame, hidden: np.ndarray, columns: list[str],
                    name: str, seed: int) -> tuple[dict[str, np.ndarray], float]:
    """Fill one draw's hidden cells with one reference; the fills and the seconds."""
    with threadpool_limits(limits=1), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        start = time.perf_counter()
        blocks, numbers, labels = [], {}, {}
        for j, col in enumerate(columns):
            values = working[col]
            if is_categorical(values):
                codes = values.cat.codes.to_numpy().copy()
                codes[hidden[:, j]] = -1
                labels[col] = (len(blocks), codes, len(values.cat.categories))
                if name in ORDINAL:
                    blocks.append(np.where(codes >= 0, codes, np.nan)[:, None].astype(float))
                else:
                    block = np.zeros((len(codes), len(values.cat.categories)))
                    block[np.flatnonzero(codes >= 0), codes[codes >= 0]] = 1.0
                    block[codes < 0] = np.nan
                    blocks.append(block)
            else:
                x = values.to_numpy(float).copy()
                x[hidden[:, j]] = np.nan
                mean, sd = float(np.nanmean(x)), float(np.nanstd(x)) or 1.0
                numbers[col] = (len(blocks), mean, sd)
                blocks.append(((x - mean) / sd)[:, None])
        widths = [b.shape[1] for b in blocks]
        starts = np.concatenate([[0], np.cumsum(widths)])
        matrix = np.hstack(blocks)
        if name == "sk-simple":
            from sklearn.impute import SimpleImputer

            label_cols = [starts[labels[c][0]] for c in labels]
            out = matrix.copy()
            number_cols = [i for i in range(matrix.shape[1]) if i not in label_cols]
            for cols, strategy in ((number_cols, "mean"), (label_cols, "most_frequent")):
                if cols:
                    out[:, cols] = SimpleImputer(strategy=strategy).fit_transform(
                        matrix[:, cols])
        else:
            out = _reference(name, seed).fit_transform(matrix)
        fills = {}
        for j, col in enumerate(columns):
            rows = hidden[:, j]
            if col in numbers:
                i, mean, sd = numbers[col]
                fills[col] = out[rows, starts[i]] * sd + mean
            else:
                i, _, n_labels = labels[col]
                if name in ORDINAL:
                    codes = np.clip(out[rows, starts[i]].round(), 0, n_labels - 1).astype(int)
                else:
                    codes = np.argmax(out[rows, starts[i]:starts[i] + n_labels], axis=1)
                fills[col] = np.asarray(working[col].cat.categories, dtype=object)[codes]
        return fills, time.perf_counter() - start


def bayes_floor_fill(values: np.ndarray, hidden: np.ndarray, mean: np.ndarray,
                     cov: np.ndarray) -> np.ndarray:
    """The conditional mean of every hidden entry given the row's observed entries.

    ``E[x_m | x_o] = mu_m + S_mo S_oo^-1 (x_o - mu_o)`` for a normal with mean ``mu`` and
    covariance ``S`` (Anderson 2003, Theorem 2.5.1); a row with nothing observed gets ``mu``.

    Returns
    -------
    ndarray
        ``values`` with the hidden entries replaced.
    """
    out = np.array(values, dtype=float, copy=True)
    patterns: dict[bytes, list[int]] = {}
    for i, row in enumerate(hidden):
        if row.any():
            patterns.setdefault(row.tobytes(), []).append(i)
    for key, rows in patterns.items():
        m = np.frombuffer(key, dtype=bool)
        o = ~m
        x = out[rows]
        if o.any():
            gain = np.linalg.solve(cov[np.ix_(o, o)], cov[np.ix_(o, m)])  # S_oo^-1 S_om
            x[:, m] = mean[m] + (x[:, o] - mean[o]) @ gain
        else:
            x[:, m] = mean[m]
        out[rows] = x
    return out
