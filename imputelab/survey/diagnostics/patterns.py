"""Which columns are blank together: the pattern table and pairwise co-missingness.

:func:`missing_patterns` counts every distinct combination of blank columns a row shows
(the complete row is one of them); :func:`co_missingness` gives the phi coefficient of each
pair of blank indicators and :func:`top_co_missing` lists the pairs most often blank together.
All three take a boolean frame, True where a cell is blank (``table.isna()``).
"""

from __future__ import annotations

import numbers
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from imputelab.checks import check_count
from imputelab.errors import DataError, OptionError

__all__ = ["PatternTable", "co_missingness", "missing_patterns", "top_co_missing"]


@dataclass(frozen=True)
class PatternTable:
    """Distinct row patterns of blank cells, most frequent first.

    Attributes
    ----------
    patterns : list of (tuple of str, int)
        The blank columns of each pattern shown (in column order) and its number of rows;
        the complete-row pattern is ``()``. Most rows first; equal counts put the pattern with
        fewer blank columns first, then the one whose blank columns come earlier in the table.
    n_rows : int
        Rows of the table.
    n_patterns : int
        Distinct patterns, including any not shown.
    complete_rows : int
        Rows with no blank cell (shown or not).
    """

    patterns: list[tuple[tuple[str, ...], int]]
    n_rows: int
    n_patterns: int
    complete_rows: int

    @property
    def truncated(self) -> int:
        """Patterns left out of :attr:`patterns`."""
        return self.n_patterns - len(self.patterns)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form; ``share`` is the pattern's fraction of all rows."""
        return {
            "patterns": [
                {"missing": list(names), "rows": count,
                 "share": count / self.n_rows if self.n_rows else 0.0}
                for names, count in self.patterns
            ],
            "n_patterns": self.n_patterns,
            "complete_rows": self.complete_rows,
            "truncated": self.truncated,
        }


def _indicators(missing: pd.DataFrame) -> np.ndarray:
    """The frame as a 2-D numpy bool array, after checking it is one."""
    if not isinstance(missing, pd.DataFrame):
        raise DataError(f"missing must be a pandas DataFrame, got {type(missing).__name__}")
    if missing.columns.has_duplicates:
        repeated = sorted({str(c) for c in missing.columns[missing.columns.duplicated()]})
        raise DataError(f"missing has repeated column names: {', '.join(repeated)}")
    for name, dtype in missing.dtypes.items():
        if not pd.api.types.is_bool_dtype(dtype):
            raise DataError(
                f"missing must hold booleans (True = blank); column {name!r} is {dtype}")
    if missing.shape[1] == 0:
        return np.zeros(missing.shape, dtype=bool)
    try:
        return missing.to_numpy(dtype=bool)
    except (TypeError, ValueError) as exc:  # a nullable boolean column holding NA
        raise DataError(f"missing must hold only True and False: {exc}") from exc


def _row_codes(bits: np.ndarray) -> np.ndarray:
    """One code per row, equal exactly for equal rows.

    Rows are packed 8 columns to a byte and the bytes read as 64-bit words, so up to 64
    columns make a single integer and ``np.unique`` on it is one sort; wider tables compare
    rows of words.
    """
    packed = np.packbits(bits, axis=1)
    width = -(-packed.shape[1] // 8) * 8
    if width != packed.shape[1]:
        packed = np.pad(packed, ((0, 0), (0, width - packed.shape[1])))
    words = np.ascontiguousarray(packed).view(np.uint64)
    return words[:, 0] if words.shape[1] == 1 else words


def missing_patterns(missing: pd.DataFrame, *, max_patterns: int | None = None) -> PatternTable:
    """Count the distinct patterns of blank cells over the rows of a table.

    Parameters
    ----------
    missing : DataFrame of bool
        True where a cell is blank; its columns are the table's columns.
    max_patterns : int, optional
        Show only this many patterns (the most frequent); the rest are counted in
        ``n_patterns`` and ``truncated``. None shows all.

    Returns
    -------
    PatternTable

    Raises
    ------
    DataError
        ``missing`` is not a boolean frame with distinct column names.
    OptionError
        ``max_patterns`` is not a whole number of at least 1.
    """
    if max_patterns is not None:
        check_count(max_patterns, "max_patterns")
    bits = _indicators(missing)
    n_rows, n_cols = bits.shape
    if n_rows == 0:
        return PatternTable([], 0, 0, 0)
    if n_cols == 0:
        return PatternTable([((), n_rows)], n_rows, 1, n_rows)

    codes = _row_codes(bits)
    _, first, counts = np.unique(codes, axis=0 if codes.ndim == 2 else None,
                                 return_index=True, return_counts=True)
    shapes = bits[first]  # one row per pattern
    n_blank = shapes.sum(axis=1)
    # np.lexsort sorts by its last key first: most rows, then fewest blank columns, then
    # blanks in earlier columns (False sorts before True, so the negated bits are the keys).
    keys = [~shapes[:, j] for j in range(n_cols - 1, -1, -1)]
    order = np.lexsort([*keys, n_blank, -counts])
    complete = n_blank == 0
    complete_rows = int(counts[complete][0]) if complete.any() else 0

    shown = order if max_patterns is None else order[:max_patterns]
    names = np.array([str(c) for c in missing.columns], dtype=object)
    patterns = [(tuple(names[shapes[i]].tolist()), int(counts[i])) for i in shown]
    return PatternTable(patterns, n_rows, len(counts), complete_rows)


def co_missingness(missing: pd.DataFrame) -> pd.DataFrame:
    """Phi coefficient of every pair of blank indicators.

    Phi is the Pearson correlation of the two 0/1 indicators, computed from the 2x2 table of
    each pair as ``(n * n11 - n1. * n.1) / sqrt(n1. n0. n.1 n.0)``: 1 when two columns are
    always blank together, -1 when exactly one of them is blank in every row.

    Parameters
    ----------
    missing : DataFrame of bool
        True where a cell is blank.

    Returns
    -------
    DataFrame
        Symmetric, indexed and labelled by the columns of ``missing``; the diagonal is 1.
        A column that is never or always blank has no variation and gets NaN throughout its
        row and column.

    Raises
    ------
    DataError
        ``missing`` is not a boolean frame with distinct column names.
    """
    bits = _indicators(missing)
    n = bits.shape[0]
    x = bits.astype(np.float64)
    # float64 matrix products count exactly up to 2**53 rows
    both = x.T @ x
    blank = np.diag(both).copy()
    spread = blank * (n - blank)
    with np.errstate(divide="ignore", invalid="ignore"):
        phi = (n * both - np.outer(blank, blank)) / np.sqrt(np.outer(spread, spread))
    phi = np.clip(phi, -1.0, 1.0)  # rounding can step just past the bounds
    varies = spread > 0
    phi[~varies, :] = np.nan
    phi[:, ~varies] = np.nan
    phi[np.diag_indices_from(phi)] = np.where(varies, 1.0, np.nan)
    return pd.DataFrame(phi, index=missing.columns.copy(), columns=missing.columns.copy())


def top_co_missing(phi: pd.DataFrame, k: int = 5, min_phi: float = 0.3) -> list[dict[str, Any]]:
    """The pairs of columns most often blank together.

    Parameters
    ----------
    phi : DataFrame
        A matrix from :func:`co_missingness`.
    k : int, default 5
        Most pairs to list.
    min_phi : float, default 0.3
        Smallest phi listed (common practice, no source: below about 0.3 an association of
        two indicators is usually called weak). Pairs that avoid each other (negative phi)
        are never listed: they are not blank together.

    Returns
    -------
    list of dict
        ``{"a": first column, "b": second column, "phi": float}``, strongest first; ``a``
        comes before ``b`` in the table, and equal phi keep table order.

    Raises
    ------
    DataError
        ``phi`` is not a square frame with the same labels on both axes.
    OptionError
        ``k`` is negative or ``min_phi`` is not a number in [-1, 1].
    """
    check_count(k, "k", low=0)
    if (isinstance(min_phi, bool) or not isinstance(min_phi, numbers.Real)
            or not -1.0 <= min_phi <= 1.0):
        raise OptionError(f"min_phi must be a number between -1 and 1, got {min_phi!r}")
    if not isinstance(phi, pd.DataFrame) or not phi.index.equals(phi.columns):
        raise DataError("phi must be a square DataFrame with the same labels on both axes, "
                        "as co_missingness returns")
    values = phi.to_numpy(dtype=float)
    rows, cols = np.triu_indices(values.shape[0], k=1)
    strength = values[rows, cols]
    keep = np.isfinite(strength) & (strength >= min_phi) & (strength > 0)
    rows, cols, strength = rows[keep], cols[keep], strength[keep]
    order = np.argsort(-strength, kind="stable")[:k]  # triu order is table order
    labels = list(phi.columns)
    return [{"a": str(labels[rows[i]]), "b": str(labels[cols[i]]), "phi": float(strength[i])}
            for i in order]
