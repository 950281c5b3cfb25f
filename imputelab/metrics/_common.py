"""What every metric shares: input checks, label encoding, the kernels, docstring parts.

Private to :mod:`imputelab.metrics`; see :mod:`imputelab.metrics.scores` for the metrics.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from imputelab.errors import DataError, OptionError

# numpy dtype kinds for which np.unique can sort the joined labels; anything else
# (object, str, datetime, mixed types) is encoded by hashing instead.
_SORTABLE_KINDS = frozenset("biuf")


# --------------------------------------------------------------------------- input handling


def _as_float(values: Any, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D float array (pandas missing markers become nan)."""
    try:
        if isinstance(values, pd.Series | pd.Index | pd.api.extensions.ExtensionArray):
            arr = values.to_numpy(dtype=float, na_value=np.nan)
        else:
            arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise DataError(f"numeric metric needs numbers in {name!r}: {exc}") from exc
    if arr.ndim != 1:
        raise DataError(f"{name!r} must be one-dimensional, got shape {arr.shape}")
    return arr


def _as_labels(values: Any, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D numpy array of labels."""
    arr = values.to_numpy() if isinstance(values, pd.Series | pd.Index) else np.asarray(values)
    if arr.ndim != 1:
        raise DataError(f"{name!r} must be one-dimensional, got shape {arr.shape}")
    return arr


def _check_same_length(true: np.ndarray, filled: np.ndarray) -> None:
    if true.shape[0] != filled.shape[0]:
        raise DataError(
            f"'true' and 'filled' must have the same length, got {true.shape[0]} and "
            f"{filled.shape[0]}"
        )


def _numeric_pair(true: Any, filled: Any) -> tuple[np.ndarray, np.ndarray]:
    t = _as_float(true, "true")
    f = _as_float(filled, "filled")
    _check_same_length(t, f)
    return t, f


def _encode(true: Any, filled: Any) -> tuple[np.ndarray, np.ndarray, int]:
    """Map the labels of both arrays to shared integer codes ``0..k-1``.

    Both arrays are encoded together so that the same label gets the same code in each,
    and ``k`` is the size of the union of their labels.
    """
    t = _as_labels(true, "true")
    f = _as_labels(filled, "filled")
    _check_same_length(t, f)
    n = t.shape[0]
    joined = np.concatenate([t, f])
    if t.dtype.kind in _SORTABLE_KINDS and f.dtype.kind in _SORTABLE_KINDS:
        uniques, codes = np.unique(joined, return_inverse=True)
        k = uniques.shape[0]
    else:
        # np.unique sorts, which fails on mixed types (str next to int) and is slower than
        # hashing on object arrays; missing markers are kept as one label of their own.
        codes, uniques = pd.factorize(joined.astype(object), use_na_sentinel=False)
        k = len(uniques)
    codes = np.asarray(codes, dtype=np.intp).reshape(-1)
    return codes[:n], codes[n:], k


def _valid_scale(scale: float | None) -> float | None:
    """Return ``scale`` as a float, or None when it cannot normalise (zero, nan, inf)."""
    if scale is None:
        return None
    s = float(scale)
    if math.isnan(s) or math.isinf(s) or s == 0.0:
        return None
    if s < 0.0:
        raise OptionError(f"scale must be a standard deviation (>= 0), got {s!r}")
    return s


# ------------------------------------------------------------------------- numeric kernels


def _rmse(t: np.ndarray, f: np.ndarray) -> float:
    if t.shape[0] == 0:
        return math.nan
    d = f - t
    return float(np.sqrt(np.dot(d, d) / d.shape[0]))


def _mae(t: np.ndarray, f: np.ndarray) -> float:
    if t.shape[0] == 0:
        return math.nan
    return float(np.mean(np.abs(f - t)))


def _w1(t: np.ndarray, f: np.ndarray) -> float:
    # With two equally sized unweighted samples, the optimal coupling pairs order
    # statistics, so W1 is the mean gap between the sorted samples; this equals
    # scipy.stats.wasserstein_distance without its general-weights machinery.
    if t.shape[0] == 0:
        return math.nan
    return float(np.mean(np.abs(np.sort(t) - np.sort(f))))


def _scaled(value: float, scale: float | None) -> float:
    s = _valid_scale(scale)
    return math.nan if s is None else value / s


# --------------------------------------------------------------------- categorical kernels


def _accuracy_codes(t: np.ndarray, f: np.ndarray) -> float:
    if t.shape[0] == 0:
        return math.nan
    return float(np.mean(t == f))


def _macro_f1_codes(t: np.ndarray, f: np.ndarray, k: int) -> float:
    if t.shape[0] == 0:
        return math.nan
    hits = t[t == f]
    tp = np.bincount(hits, minlength=k)
    support = np.bincount(t, minlength=k)
    predicted = np.bincount(f, minlength=k)
    # F1 = 2 TP / (2 TP + FP + FN) = 2 TP / (support + predicted). Every code is in the
    # union of labels, so the denominator is positive; a label never hit scores 0, which
    # is what zero_division=0 gives.
    return float(np.mean(2.0 * tp / (support + predicted)))


def _total_variation_codes(t: np.ndarray, f: np.ndarray, k: int) -> float:
    n = t.shape[0]
    if n == 0:
        return math.nan
    diff = np.bincount(t, minlength=k) - np.bincount(f, minlength=k)
    return float(0.5 * np.abs(diff).sum() / n)


# ----------------------------------------------------------------- shared docstring parts

_PARAMETERS = """    Parameters
    ----------
"""
_PAIR = _PARAMETERS + """    true : array-like of {kind}, shape (n,)
        Hidden {what}.
    filled : array-like of {kind}, shape (n,)
        {What} put in their place."""
_SCALE = """    scale : float or None
        Standard deviation (``ddof=0``) of the column's observed values."""
_RAISES = """    Raises
    ------
    DataError
        If the inputs are {checks}."""
_NUMBERS = _PAIR.format(kind="float", what="values", What="Values")
_NUMBER_CHECKS = _RAISES.format(checks="not numeric, not 1-D, or differ in length")
_DOC_PARTS = {
    "pair_numeric": _NUMBERS,
    "pair_scaled": _NUMBERS + "\n" + _SCALE,
    "pair_labels": _PAIR.format(kind="hashable", what="labels", What="Labels"),
    "raises_numeric": _NUMBER_CHECKS,
    "raises_scaled": _NUMBER_CHECKS + "\n    OptionError\n        If ``scale`` is negative.",
    "raises_labels": _RAISES.format(checks="not 1-D or differ in length"),
    "returns_float": "    Returns\n    -------\n    float",
}


def shared_doc(func: Callable[..., Any]) -> Callable[..., Any]:
    """Put the shared numpydoc parts (``{pair_numeric}``, ...) into a docstring."""
    doc = func.__doc__ or ""
    for key, text in _DOC_PARTS.items():
        doc = doc.replace("{" + key + "}", text)
    func.__doc__ = doc
    return func
