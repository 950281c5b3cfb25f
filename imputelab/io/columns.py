"""Column kinds, disguised missing values and suspected missing codes.

Every column gets one kind:

``numeric``      numbers (integers or decimals); a few non-numeric cells are disguised blanks
``binary``       exactly two distinct observed values
``categorical``  a modest set of labels
``datetime``     timestamps in one recognised format
``text``         free text or high-cardinality labels: passed through, never imputed
``identifier``   unique per row and key-shaped (a trip id ``RF-26-000123``, a row number):
                 passed through, never imputed

:func:`infer_spec` decides a column's :class:`ColumnSpec` (its kind and the cleaning it needs)
from the raw cells; :func:`clean_column` applies a spec to raw cells, the same way on the file
that was surveyed and on any later file.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from imputelab.errors import DataError, OptionError

__all__ = [
    "INDICATOR_SUFFIX",
    "blank_mask",
    "new_token_warnings",
    "IMPUTABLE_KINDS",
    "KINDS",
    "MISSING_TOKENS",
    "ColumnSpec",
    "clean_column",
    "infer_spec",
    "numeric_codes",
    "observed_numbers",
    "parse_numbers",
    "suspected_codes",
]

KINDS = ("numeric", "binary", "categorical", "datetime", "text", "identifier")
IMPUTABLE_KINDS = ("numeric", "binary", "categorical", "datetime")

# Text that stands for "no value" in any column, compared case-insensitively after stripping.
# Common practice, no source: the spellings spreadsheets, databases and exports produce.
MISSING_TOKENS = frozenset(
    {
        "na", "n/a", "n.a.", "nan", "null", "none", "nil", "?", "-", "--", "---", ".",
        "#n/a", "#na", "#value!", "missing", "unknown", "not recorded", "not available",
        "no data", "not known", "(blank)", "(missing)",
    }
)

# A column is numeric when at least this share of its non-blank cells parse as numbers
# (common practice, no source: "a few" stray cells are disguised blanks, many are not).
NUMERIC_SHARE = 0.9
DATETIME_SHARE = 0.95
TEXT_MIN_UNIQUE = 20
TEXT_UNIQUE_SHARE = 0.5
# Free text: several words a cell on average and many distinct values (common practice, no
# source: labels are short; sentences are not).
TEXT_MIN_WORDS = 3.0
TEXT_MIN_UNIQUE_SENTENCES = 50

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
# Whole numbers at or beyond 2**63 do not fit the Int64 dtype; such columns stay float64.
_INT64_LIMIT = 2.0**63
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")
# A key: one token of letters, digits and separators with at least one digit ("TRK-00123",
# "RF-26-000123", "4f9c2e", "42"). A cell with a space is words, never a key (common practice,
# no source: codes are written without spaces so they can be typed and joined on).
_KEY = re.compile(r"^(?=[^\s]*\d)[A-Za-z0-9][A-Za-z0-9_\-./:#@]*$")


@dataclass
class ColumnSpec:
    """How one column is read: its kind and the cleaning applied to its cells.

    Attributes
    ----------
    kind : str
        One of :data:`KINDS`.
    integer : bool
        Numeric values are whole numbers (they are written back as integers).
    decimals : int
        Most decimal places seen in the column (imputed numbers are written with as many).
    date_format : str or None
        ``strptime`` format of a datetime column read from text.
    ambiguous_formats : list of str
        Other formats that also read every value (reported, never chosen silently).
    tokens : dict
        Non-blank cells turned into missing values, with their counts.
    missing_codes : list
        Values confirmed by the user as missing codes (``--missing-code``).
    kind_source : {"inferred", "user"}
        Whether the kind was inferred or given with ``--kind``.
    """

    kind: str
    integer: bool = False
    decimals: int = 0
    date_format: str | None = None
    ambiguous_formats: list[str] = field(default_factory=list)
    tokens: dict[str, int] = field(default_factory=dict)
    missing_codes: list[Any] = field(default_factory=list)
    kind_source: str = "inferred"

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict."""
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ColumnSpec:
        """Inverse of :meth:`to_dict`; unknown keys are ignored."""
        known = {k: data[k] for k in cls.__dataclass_fields__ if k in data}
        return cls(**known)


def _is_text(series: pd.Series) -> bool:
    return pd.api.types.is_string_dtype(series.dtype) and not isinstance(
        series.dtype, pd.CategoricalDtype
    )


INDICATOR_SUFFIX = "__was_missing"
"""Suffix of the 0/1 column that marks a filled column's imputed cells (``NAME__was_missing``)."""


def blank_mask(values: pd.Series) -> np.ndarray:
    """The one definition of a blank: a missing cell, or text that is empty or all spaces.

    Parameters
    ----------
    values : Series
        Raw text cells (CSV) or typed values (Parquet, or after cleaning).

    Returns
    -------
    ndarray of bool
    """
    blank = values.isna().to_numpy(dtype=bool, na_value=True)
    if pd.api.types.is_string_dtype(values.dtype) and not isinstance(
        values.dtype, pd.CategoricalDtype
    ):
        blank = blank | values.str.strip().eq("").to_numpy(dtype=bool, na_value=False)
    return blank


def new_token_warnings(tokens: Mapping[str, Mapping[str, int]]) -> list[str]:
    """One line per column for cells read as missing that the plan had not recorded.

    The five most common tokens are shown with their counts, most common first.
    """
    lines = []
    for name, found in tokens.items():
        ordered = sorted(found.items(), key=lambda kv: (-kv[1], kv[0]))[:5]
        shown = ", ".join(f"'{t}' ({c})" for t, c in ordered)
        lines.append(f"column '{name}': new cells read as missing: {shown}")
    return lines


def _blank_mask(values: pd.Series) -> np.ndarray:
    """Blank or common missing token (text input)."""
    lowered = values.str.strip().str.lower()
    return blank_mask(values) | lowered.isin(MISSING_TOKENS).to_numpy(dtype=bool, na_value=False)


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


def _tokens(raw: pd.Series, turned_missing: np.ndarray) -> dict[str, int]:
    cells = raw[turned_missing].astype("str").str.strip()
    cells = cells[cells != ""]
    counts = cells.value_counts(sort=False)
    return {str(k): int(v) for k, v in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))}


def _parse_dates(text: pd.Series, fmt: str) -> pd.Series:
    return pd.to_datetime(text, format=fmt, errors="coerce")


def _detect_date_format(text: pd.Series) -> tuple[str | None, list[str]]:
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
    sample_share = {fmt: float(_parse_dates(sample, fmt).notna().mean()) for fmt in _DATE_FORMATS}
    best = max(_DATE_FORMATS, key=sample_share.get)  # first of the ties: formats are in order
    if sample_share[best] < DATETIME_SHARE:
        return None, []
    full_share: dict[str, float] = {}

    def share_of(fmt: str) -> float:
        if whole:
            return sample_share[fmt]
        if fmt not in full_share:
            full_share[fmt] = float(_parse_dates(text, fmt).notna().mean())
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


def infer_spec(
    raw: pd.Series,
    *,
    decimal: str = ".",
    kind: str | None = None,
    date_format: str | None = None,
    missing_codes: list[Any] | None = None,
) -> ColumnSpec:
    """Infer a column's kind and cleaning from its raw cells.

    Parameters
    ----------
    raw : Series
        The column as read (text for CSV, typed for Parquet).
    decimal : str
        Decimal mark of the file.
    kind : str, optional
        Kind given by the user (``--kind``); inference then only fills in the details.
    date_format : str, optional
        Format given by the user (``--date-format``).
    missing_codes : list, optional
        Values confirmed as missing codes (``--missing-code``).

    Returns
    -------
    ColumnSpec
    """
    if kind is not None and kind not in KINDS:
        raise OptionError(f"--kind: unknown kind '{kind}'; choose one of: {', '.join(KINDS)}")
    spec = ColumnSpec(kind="categorical", missing_codes=list(missing_codes or []),
                      kind_source="user" if kind else "inferred")
    if _is_text(raw):
        blank = _blank_mask(raw)
        present = raw[~blank].str.strip()
        numbers = parse_numbers(present, decimal)
        share = float(numbers.notna().mean()) if len(present) else 0.0
        if kind == "numeric" or (kind is None and len(present) and share >= NUMERIC_SHARE):
            spec.kind = "numeric"
        elif kind == "datetime" or (kind is None and date_format is None and len(present)):
            fmt, ambiguous = (date_format, []) if date_format else _detect_date_format(present)
            if fmt is not None:
                spec.kind, spec.date_format, spec.ambiguous_formats = "datetime", fmt, ambiguous
            elif kind == "datetime":
                raise OptionError(
                    f"--kind {raw.name}=datetime: no known date format reads this column; "
                    "give one with --date-format COLUMN=FORMAT"
                )
        elif date_format is not None:
            spec.kind, spec.date_format = "datetime", date_format
        if spec.kind == "numeric":
            good = numbers.notna()
            whole = numbers[good].to_numpy()
            spec.integer = (
                bool(good.any())
                and bool(np.all(np.mod(whole, 1) == 0))
                and _fits_int64(whole)
                and not present[good].str.contains(r"[.,]", regex=True).any()
            )
            spec.decimals = 0 if spec.integer else _decimals(present[good])
            if (kind is None and spec.integer and not spec.missing_codes
                    and int(good.sum()) == len(raw) and looks_like_row_key(whole)):
                spec.kind = "identifier"
        if kind is None and spec.kind == "categorical":
            # Confirmed codes are not labels: "yes", "no" and a code make a binary column.
            labels = present[~_code_mask(present, spec.missing_codes, False, decimal)]
            spec.kind = _label_kind(labels, n_rows=len(raw))
    else:
        spec.kind = kind or _typed_kind(raw)
        if spec.kind == "numeric" and pd.api.types.is_numeric_dtype(raw.dtype):
            values = pd.to_numeric(raw, errors="coerce").dropna().to_numpy(float)
            spec.integer = pd.api.types.is_integer_dtype(raw.dtype) and _fits_int64(values)
            spec.decimals = 0 if spec.integer else 6
            if kind is None and len(np.unique(values)) == 2:
                spec.kind = "binary"
    if kind is not None:
        spec.kind = kind
    # Two values left once blanks and confirmed codes are out (0, 1 and a code 99): binary.
    if kind is None and (spec.kind == "numeric" or (spec.kind == "categorical"
                                                    and spec.missing_codes)):
        cleaned, _ = clean_column(raw, spec, decimal=decimal)
        if cleaned.nunique(dropna=True) == 2:
            spec.kind = "binary"
    _, spec.tokens = clean_column(raw, spec, decimal=decimal)
    return spec


def looks_like_row_key(values: np.ndarray) -> bool:
    """Whole numbers that number the rows: unique and gap-free (1, 2, 3, ...), or unique over
    at least 100 rows (parcel or account numbers). Common practice, no source."""
    if len(values) <= 20 or len(np.unique(values)) != len(values):
        return False
    return bool((np.diff(np.sort(values)) == 1).all()) or len(values) >= 100


def _key_shaped(values: pd.Series) -> bool:
    """Every cell is key-shaped: one token without spaces, holding at least one digit.

    Unique short notes ("late pickup at depot 4") are unique too, but they are words.

    """
    return bool(values.str.match(_KEY).fillna(False).all())


def _label_kind(present: pd.Series, n_rows: int) -> str:
    n_unique = int(present.nunique())
    if n_unique == 2:
        return "binary"
    if n_unique == len(present) == n_rows and n_rows >= 2:
        if _key_shaped(present):
            return "identifier"
        # Unique per row but not keys (short notes, names): free text, passed through.
        return "text"
    share = n_unique / max(len(present), 1)
    if n_unique > TEXT_MIN_UNIQUE and share > TEXT_UNIQUE_SHARE:
        return "text"
    if n_unique > TEXT_MIN_UNIQUE_SENTENCES:
        words = present.head(5000).str.split().str.len().mean()
        if words >= TEXT_MIN_WORDS:
            return "text"
    return "categorical"


def _typed_kind(raw: pd.Series) -> str:
    dtype = raw.dtype
    if pd.api.types.is_bool_dtype(dtype):
        return "binary"
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return "datetime"
    if isinstance(dtype, pd.CategoricalDtype):
        return "binary" if len(raw.dropna().unique()) == 2 else "categorical"
    if pd.api.types.is_numeric_dtype(dtype):
        values = raw.dropna().to_numpy(float)
        whole = bool(len(values)) and bool(np.all(np.mod(values, 1) == 0))
        if whole and len(values) == len(raw) and looks_like_row_key(values):
            return "identifier"
        return "numeric"
    return "categorical"


def _code_mask(
    values: pd.Series, codes: list[Any], numeric: bool, decimal: str = "."
) -> np.ndarray:
    """Cells equal to a confirmed missing code.

    ``numeric`` values are floats and match the numeric codes. Labels match a code written the
    same way, or, when both the cell and the code are numbers, of the same value: a code found
    as 99.0 by :func:`suspected_codes` matches the text "99".
    """
    if not codes:
        return np.zeros(len(values), bool)
    wanted = np.array(numeric_codes(codes), dtype=float)
    if numeric:
        return np.isin(values.to_numpy(float, na_value=np.nan), wanted)
    cells = values.astype("str").str.strip()
    mask = cells.isin([str(c).strip() for c in codes]).to_numpy(bool)
    if len(wanted):
        if pd.api.types.is_numeric_dtype(values.dtype) and not pd.api.types.is_bool_dtype(
            values.dtype
        ):
            numbers = pd.to_numeric(values, errors="coerce").to_numpy(float, na_value=np.nan)
        else:
            numbers = parse_numbers(cells.fillna(""), decimal).to_numpy(float)
        mask = mask | np.isin(numbers, wanted)
    return mask


def clean_column(
    raw: pd.Series, spec: ColumnSpec, *, decimal: str = "."
) -> tuple[pd.Series, dict[str, int]]:
    """Apply a spec to raw cells: typed values with every kind of blank as missing.

    Returns
    -------
    values : Series
        ``float64`` or ``Int64`` for numeric columns, ``datetime64`` for datetimes, the raw
        text for text and identifier columns, and labels (text, or the file's type) otherwise.
    tokens : dict
        Non-blank cells that became missing, with their counts.

    Examples
    --------
    >>> spec = ColumnSpec(kind="numeric", integer=True)
    >>> values, tokens = clean_column(pd.Series(["3", "n/a", "", "7"]), spec)
    >>> values.tolist(), tokens
    ([3, <NA>, <NA>, 7], {'n/a': 1})
    """
    if spec.kind in ("text", "identifier"):
        return raw, {}
    text = _is_text(raw)
    blank = _blank_mask(raw) if text else raw.isna().to_numpy(bool)
    if spec.kind == "numeric":
        if text:
            values = parse_numbers(raw.where(~blank, ""), decimal)
        else:
            values = pd.to_numeric(raw, errors="coerce").astype(float)
        codes = _code_mask(values, spec.missing_codes, numeric=True)
        missing = values.isna().to_numpy(bool) | codes
        values = values.mask(pd.Series(missing, index=raw.index))
        if spec.integer:
            if not _fits_int64(values.dropna().to_numpy(float)):
                # A spec inferred on one file, applied to another with larger numbers.
                raise DataError(
                    f"column '{raw.name}' holds whole numbers beyond the 64-bit integer range "
                    "but its plan reads it as integers; survey this file again"
                )
            values = values.round().astype("Int64")
        else:
            values = values.astype(float)
        return values, _tokens(raw, missing & ~codes) if text else {}
    if spec.kind == "datetime":
        if text:
            values = _parse_dates(raw.where(~blank, "").str.strip(), spec.date_format or "ISO8601")
        else:
            values = pd.to_datetime(raw, errors="coerce")
        missing = values.isna().to_numpy(bool)
        return values, _tokens(raw, missing) if text else {}
    # binary and categorical: labels
    codes = _code_mask(raw, spec.missing_codes, numeric=False, decimal=decimal)
    missing = blank | codes
    if text:
        values = raw.str.strip().where(~pd.Series(missing, index=raw.index))
        return values.astype("str"), _tokens(raw, missing & ~codes)
    return raw.mask(pd.Series(missing, index=raw.index)), {}
