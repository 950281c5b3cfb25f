"""Dates in text cells: which ``strptime`` format reads a column.

Part of :mod:`imputelab.io.columns`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["DATETIME_SHARE", "detect_date_format", "parse_dates"]

#: A column is a datetime when at least this share of its non-blank cells read as dates
#: (common practice, no source).
DATETIME_SHARE = 0.95

# Formats tried for datetime columns, most specific first. Day-first and month-first orders are
# both tried; when both read every value the column is reported as ambiguous.
_DATE_FORMATS = (
    "%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M:%S", "%Y-%m-%dT%H:%M", "%Y-%m-%d %H:%M", "%Y-%m-%d",
    "%Y/%m/%d %H:%M:%S", "%Y/%m/%d %H:%M", "%Y/%m/%d",
    "%d/%m/%Y %H:%M:%S", "%d/%m/%Y %H:%M", "%d/%m/%Y",
    "%m/%d/%Y %H:%M:%S", "%m/%d/%Y %H:%M", "%m/%d/%Y",
    "%d.%m.%Y %H:%M:%S", "%d.%m.%Y %H:%M", "%d.%m.%Y",
    "%d-%m-%Y %H:%M:%S", "%d-%m-%Y %H:%M", "%d-%m-%Y",
)
_SWAP = {"%d/%m/%Y": "%m/%d/%Y", "%m/%d/%Y": "%d/%m/%Y"}
# Formats are ranked on at most this many cells spread over the whole column; the full column
# is read only when the sample leaves a doubt (common practice, no source).
_DATE_SAMPLE = 2000


def parse_dates(text: pd.Series, fmt: str) -> pd.Series:
    """``text`` read with the ``strptime`` format ``fmt``; cells it does not read are NaT."""
    return pd.to_datetime(text, format=fmt, errors="coerce")


def detect_date_format(text: pd.Series) -> tuple[str | None, list[str]]:
    """Pick the format that reads the most of ``text`` (non-blank, stripped cells).

    Formats are ranked on evenly spaced cells, so that a change of writing late in the file is
    seen. When the winner does not read every cell of the column, each format that reached the
    threshold on the sample is tried on the whole column and the one reading most wins; ties go
    to the earlier format in :data:`_DATE_FORMATS`.
    """
    n = len(text)
    if n == 0:
        return None, []
    if n <= _DATE_SAMPLE:
        sample = text
    else:
        sample = text.iloc[np.unique(np.linspace(0, n - 1, _DATE_SAMPLE).round().astype(int))]
    whole = sample is text
    sample_share = {fmt: float(parse_dates(sample, fmt).notna().mean()) for fmt in _DATE_FORMATS}
    best = max(_DATE_FORMATS, key=sample_share.get)  # first of the ties: formats are in order
    if sample_share[best] < DATETIME_SHARE:
        return None, []
    full_share: dict[str, float] = {}

    def share_of(fmt: str) -> float:
        if whole:
            return sample_share[fmt]
        if fmt not in full_share:
            full_share[fmt] = float(parse_dates(text, fmt).notna().mean())
        return full_share[fmt]

    if share_of(best) < 1.0:
        candidates = [fmt for fmt in _DATE_FORMATS if sample_share[fmt] >= DATETIME_SHARE]
        best = max(candidates, key=share_of)
    best_share = share_of(best)
    if best_share < DATETIME_SHARE:
        return None, []
    # Day-first and month-first readings that both read every cell the chosen one reads: the
    # file cannot tell them apart, so the other is reported rather than dropped silently. A
    # sample cell that only the chosen one reads already settles it.
    ambiguous = []
    for left, right in _SWAP.items():
        if best.startswith(left):
            alt = best.replace(left, right)
            if sample_share[alt] >= sample_share[best] and share_of(alt) >= best_share:
                ambiguous.append(alt)
    return best, ambiguous
