"""Numbers in text cells: parsing, decimals, and values that look like missing-value codes.

Part of :mod:`imputelab.io.columns`, which re-exports the public names.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["numeric_codes", "observed_numbers", "parse_numbers", "suspected_codes"]

# Whole numbers at or beyond 2**63 do not fit the Int64 dtype; such columns stay float64.
_INT64_LIMIT = 2.0**63
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")


def _is_text(series: pd.Series) -> bool:
    return pd.api.types.is_string_dtype(series.dtype) and not isinstance(
        series.dtype, pd.CategoricalDtype
    )


def parse_numbers(values: pd.Series, decimal: str = ".") -> pd.Series:
    """Parse text to floats; cells that are not numbers become NaN.

    Parameters
    ----------
    values : Series of str
    decimal : {".", ","}
        Decimal mark of the file.

    Examples
    --------
    >>> parse_numbers(pd.Series(["1", "2,5", "x"]), decimal=",").tolist()
    [1.0, 2.5, nan]
    """
    text = values.astype("str").str.strip()
    if decimal == ",":
        text = text.str.replace(",", ".", regex=False)
    ok = text.str.match(_NUMBER).fillna(False).to_numpy(bool)
    out = np.full(len(text), np.nan)
    if ok.any():
        out[ok] = pd.to_numeric(text[ok]).to_numpy(float)
    return pd.Series(out, index=values.index)


def _decimals(text: pd.Series) -> int:
    parts = text.str.extract(r"[.,](\d+)$", expand=False)
    lengths = parts.str.len().dropna()
    return int(min(lengths.max(), 6)) if len(lengths) else 0


def _fits_int64(values: np.ndarray) -> bool:
    return bool(np.all(np.abs(values) < _INT64_LIMIT))


def suspected_codes(values: np.ndarray) -> list[float]:
    """Numbers that look like missing-value codes.

    A value is suspected when it sits at an extreme of the column, repeats, is written with
    nines only (9, 99, -999, ...) or is a negative code in an otherwise non-negative column,
    and lies far outside the rest of the values (beyond 1.5 interquartile ranges, Tukey's fences).

    Parameters
    ----------
    values : ndarray of float
        Observed (non-NaN) values.

    Examples
    --------
    >>> suspected_codes(np.array([1, 2, 3, 4, 5, 3, 2, 99, 99, 99], dtype=float))
    [99.0]
    """
    values = values[np.isfinite(values)]
    if len(values) < 10:
        return []
    found = []
    for extreme in (values.min(), values.max()):
        if extreme in found:
            continue
        count = int((values == extreme).sum())
        if count < 2 or count > 0.5 * len(values):
            continue
        rest = values[values != extreme]
        if len(rest) < 5:
            continue
        digits = str(int(abs(extreme))) if float(extreme).is_integer() else ""
        nines = digits != "" and set(digits) == {"9"}
        negative_code = extreme < 0 and rest.min() >= 0 and (nines or digits == "1")
        if not (nines or negative_code):
            continue
        q1, q3 = np.percentile(rest, [25, 75])
        fence = 1.5 * max(q3 - q1, 1e-12)
        # ... and apart from the others: a 9 at the top of a 1-9 scale is a rating, not a code
        gap = float(np.min(np.abs(rest - extreme)))
        spread = float(rest.max() - rest.min())
        apart = gap > 0.5 * spread
        if (extreme > q3 + fence or extreme < q1 - fence) and apart or negative_code:
            found.append(float(extreme))
    return sorted(found)


def numeric_codes(codes: list[Any]) -> list[float]:
    """The missing codes that are numbers, as floats (``"99"``, ``99`` and ``99.0`` alike).

    Examples
    --------
    >>> numeric_codes([99, "-9", "XX", 1.5])
    [99.0, -9.0, 1.5]
    """
    out = []
    for code in codes:
        if isinstance(code, bool):
            continue
        if isinstance(code, int | float | np.integer | np.floating):
            out.append(float(code))
        elif isinstance(code, str) and _NUMBER.match(code.strip()):
            out.append(float(code.strip()))
    return out


def observed_numbers(values: pd.Series, decimal: str = ".") -> np.ndarray | None:
    """The finite numbers of a cleaned column, or None when some present cell is not a number.

    Works on what :func:`clean_column` returns for numeric columns and for binary or
    categorical columns whose labels are numbers (a 0/1 flag read from text), so that
    :func:`suspected_codes` can look at both.

    Parameters
    ----------
    values : Series
        A cleaned column: missing cells are NA.
    decimal : str
        Decimal mark of the file, for labels read from text.

    Examples
    --------
    >>> observed_numbers(pd.Series(["1", None, "99"], dtype="str")).tolist()
    [1.0, 99.0]
    >>> observed_numbers(pd.Series(["yes", "no"], dtype="str")) is None
    True
    """
    present = values.dropna()
    if pd.api.types.is_bool_dtype(present.dtype) or pd.api.types.is_datetime64_any_dtype(
        present.dtype
    ):
        return None
    if pd.api.types.is_numeric_dtype(present.dtype):
        numbers = present.to_numpy(float, na_value=np.nan)
    elif _is_text(present):
        numbers = parse_numbers(present, decimal).to_numpy(float)
        if np.isnan(numbers).any():
            return None
    else:
        return None
    return numbers[np.isfinite(numbers)]
