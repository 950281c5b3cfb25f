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

from imputelab.errors import DataError, OptionError, param
from imputelab.io.column_dates import DATETIME_SHARE, detect_date_format, parse_dates
from imputelab.io.column_numbers import (
    _decimals,
    _fits_int64,
    _is_text,
    numeric_codes,
    observed_numbers,
    parse_numbers,
    suspected_codes,
)

__all__ = [
    "DATETIME_SHARE",
    "INDICATOR_SUFFIX",
    "blank_mask",
    "new_token_warnings",
    "ordered_tokens",
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
TEXT_MIN_UNIQUE = 20
TEXT_UNIQUE_SHARE = 0.5
# Free text: several words a cell on average and many distinct values (common practice, no
# source: labels are short; sentences are not).
TEXT_MIN_WORDS = 3.0
TEXT_MIN_UNIQUE_SENTENCES = 50

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
        Values confirmed by the user as missing codes (the survey's ``missing_codes``).
    kind_source : {"inferred", "user"}
        Whether the kind was inferred or given by the user (the survey's ``kinds``).
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
        shown = ", ".join(f"'{t}' ({c})" for t, c in list(ordered_tokens(found).items())[:5])
        lines.append(f"column '{name}': new cells read as missing: {shown}")
    return lines


def ordered_tokens(counts: Mapping[Any, int]) -> dict[str, int]:
    """Token counts, most frequent first (ties in text order), as plain ``str: int``."""
    return {str(k): int(v) for k, v in sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))}


def _blank_mask(values: pd.Series) -> np.ndarray:
    """Blank or common missing token (text input)."""
    lowered = values.str.strip().str.lower()
    return blank_mask(values) | lowered.isin(MISSING_TOKENS).to_numpy(dtype=bool, na_value=False)


def _tokens(raw: pd.Series, turned_missing: np.ndarray) -> dict[str, int]:
    cells = raw[turned_missing].astype("str").str.strip()
    cells = cells[cells != ""]
    counts = cells.value_counts(sort=False)
    return ordered_tokens(counts)


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
        Kind given by the user (the survey's ``kinds``); inference then only fills in the
        details.
    date_format : str, optional
        Format given by the user (the survey's ``date_formats``).
    missing_codes : list, optional
        Values confirmed as missing codes (the survey's ``missing_codes``).

    Returns
    -------
    ColumnSpec
    """
    if kind is not None and kind not in KINDS:
        raise OptionError(f"{param('kinds')}: unknown kind '{kind}'; "
                          f"choose one of: {', '.join(KINDS)}")
    spec = ColumnSpec(kind="categorical", missing_codes=list(missing_codes or []),
                      kind_source="user" if kind else "inferred")
    if _is_text(raw):
        _infer_from_text(raw, spec, decimal=decimal, kind=kind, date_format=date_format)
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


def _infer_from_text(raw: pd.Series, spec: ColumnSpec, *, decimal: str, kind: str | None,
                     date_format: str | None) -> None:
    """Set ``spec``'s kind and number or date details from a column of text cells."""
    present = raw[~_blank_mask(raw)].str.strip()
    numbers = parse_numbers(present, decimal)
    share = float(numbers.notna().mean()) if len(present) else 0.0
    if kind == "numeric" or (kind is None and len(present) and share >= NUMERIC_SHARE):
        spec.kind = "numeric"
    elif kind == "datetime" or (kind is None and date_format is None and len(present)):
        fmt, ambiguous = (date_format, []) if date_format else detect_date_format(present)
        if fmt is not None:
            spec.kind, spec.date_format, spec.ambiguous_formats = "datetime", fmt, ambiguous
        elif kind == "datetime":
            raise OptionError(
                f"{param('kinds')} {raw.name}=datetime: no known date format reads this "
                f"column; give one with {param('date_formats')} (COLUMN=FORMAT)"
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
            values = parse_dates(raw.where(~blank, "").str.strip(), spec.date_format or "ISO8601")
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
