"""The working frame: what methods and masks see.

Methods are written against two column types only: ``float64`` (numbers; datetimes as seconds
since 1970) and unordered pandas ``Categorical`` (labels of categorical and binary columns).
:class:`Encoding` turns a typed table into that frame and back, so that integers come back as
integers, labels as the column's own labels and timestamps as timestamps.

Datetime columns also feed the other columns' models through derived feature columns
(year, month, day of week, hour, and the duration between each pair of datetime columns),
made by :func:`with_derived` after masking, so a hidden timestamp never leaks through them.
"""

from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["DERIVED_SEP", "Encoding", "derived_from", "is_categorical", "with_derived"]

DERIVED_SEP = "__"
_COMPONENTS = ("year", "month", "day_of_week", "hour")
_US_PER_S = 1_000_000


def is_categorical(series: pd.Series) -> bool:
    """True for a working-frame label column."""
    return isinstance(series.dtype, pd.CategoricalDtype)


def _sort_labels(values: Sequence[Any]) -> list[Any]:
    try:
        return sorted(values)
    except TypeError:
        return sorted(values, key=str)


def _to_seconds(values: pd.Series) -> np.ndarray:
    stamps = pd.to_datetime(values, errors="coerce")
    if isinstance(stamps.dtype, pd.DatetimeTZDtype):  # seconds are always UTC seconds
        stamps = stamps.dt.tz_convert("UTC").dt.tz_localize(None)
    out = np.full(len(stamps), np.nan)
    ok = stamps.notna().to_numpy()
    if ok.any():
        # microseconds reach the year 9999 (nanoseconds stop in 2262)
        us = stamps[ok].astype("datetime64[us]").to_numpy().astype("int64")
        out[ok] = us / _US_PER_S
    return out


@dataclass
class Encoding:
    """How a typed table maps to the working frame.

    Attributes
    ----------
    kinds : dict
        Kind of every working column (``numeric``, ``binary``, ``categorical``, ``datetime``).
    categories : dict
        Labels of every label column, in code order.
    ranges : dict
        Observed minimum and maximum of every numeric and datetime column; numeric fills are
        clipped to it (a fill outside everything ever observed would be an extrapolation).
    integer : dict
        Numeric columns written back as whole numbers.
    resolution : dict
        Seconds to which each datetime column's fills are rounded (60 when its format has
        no seconds, 86400 when it has no time).
    decimals : dict
        Decimal places numeric fills are rounded to.
    """

    kinds: dict[str, str]
    categories: dict[str, list[Any]] = field(default_factory=dict)
    ranges: dict[str, tuple[float, float]] = field(default_factory=dict)
    integer: dict[str, bool] = field(default_factory=dict)
    resolution: dict[str, int] = field(default_factory=dict)
    decimals: dict[str, int] = field(default_factory=dict)

    @classmethod
    def fit(
        cls,
        typed: pd.DataFrame,
        kinds: Mapping[str, str],
        *,
        integer: Mapping[str, bool] | None = None,
        date_formats: Mapping[str, str | None] | None = None,
        decimals: Mapping[str, int] | None = None,
    ) -> Encoding:
        """Learn categories and ranges from a typed frame.

        Parameters
        ----------
        typed : DataFrame
            Cleaned table (missing cells are NA).
        kinds : mapping
            Working columns and their kinds, in the order the working frame keeps.
        integer : mapping, optional
            Numeric columns holding whole numbers.
        date_formats : mapping, optional
            Text format of datetime columns (sets the rounding of filled timestamps).
        decimals : mapping, optional
            Decimal places of numeric columns: fills are rounded to them, so a CSV and a
            Parquet output of the same fill hold the same values.
        """
        enc = cls(kinds=dict(kinds))
        integer = integer or {}
        date_formats = date_formats or {}
        for name, kind in kinds.items():
            column = typed[name]
            if kind in ("categorical", "binary"):
                enc.categories[name] = _sort_labels(list(pd.unique(column.dropna())))
                continue
            values = _to_seconds(column) if kind == "datetime" else pd.to_numeric(
                column, errors="coerce").to_numpy(float)
            finite = values[np.isfinite(values)]
            if len(finite):
                enc.ranges[name] = (float(finite.min()), float(finite.max()))
            # Whole numbers stored as floats (a count with holes, read from Parquet) get whole
            # fills too; the column keeps its float type.
            whole = len(finite) > 0 and kind == "numeric" and bool(np.all(np.mod(finite, 1) == 0))
            enc.integer[name] = bool(integer.get(name, False)
                                     or pd.api.types.is_integer_dtype(column) or whole)
            if decimals and name in decimals:
                enc.decimals[name] = int(decimals[name])
            if kind == "datetime":
                fmt = date_formats.get(name)
                if fmt is None or "%S" in fmt:
                    enc.resolution[name] = 1
                elif "%H" in fmt:
                    enc.resolution[name] = 60
                else:
                    enc.resolution[name] = 86400
        return enc

    @property
    def columns(self) -> list[str]:
        """Working columns, in order."""
        return list(self.kinds)

    def encode(self, typed: pd.DataFrame) -> pd.DataFrame:
        """Typed frame to working frame (unseen labels become missing)."""
        data = {}
        for name, kind in self.kinds.items():
            column = typed[name]
            if kind in ("categorical", "binary"):
                labels = column.astype(object)
                known = labels.isin(self.categories[name]) & column.notna()
                data[name] = pd.Categorical(labels.where(known, None),
                                            categories=self.categories[name])
            elif kind == "datetime":
                data[name] = _to_seconds(column)
            else:
                data[name] = pd.to_numeric(column, errors="coerce").to_numpy(float, na_value=np.nan)
        return pd.DataFrame(data, index=typed.index)

    def decode(self, working: pd.DataFrame, typed: pd.DataFrame,
               unclipped: Collection[str] = ()) -> pd.DataFrame:
        """Put a filled working frame's values into the holes of ``typed``.

        Only cells missing in ``typed`` change; every other cell and every dtype is kept.
        Numeric fills are clipped to the observed range, except in ``unclipped`` columns
        (filled with a constant someone chose, such as 0 for "no garage": it may lie
        outside every observed value on purpose).
        """
        out = typed.copy()
        for name, kind in self.kinds.items():
            if name not in working.columns:
                continue
            holes = typed[name].isna().to_numpy().copy()
            filled = working[name]
            holes &= filled.notna().to_numpy()
            if not holes.any():
                continue
            if kind in ("categorical", "binary"):
                values = np.asarray(filled.astype(object))[holes]
            else:
                raw = filled.to_numpy(float)[holes]
                bounds = self.ranges.get(name) if name not in unclipped else None
                if bounds is not None:
                    raw = np.clip(raw, *bounds)
                if kind == "datetime":
                    step = self.resolution.get(name, 1)
                    seconds = np.round(raw / step) * step
                    values = seconds.astype("int64").astype("datetime64[s]")
                else:
                    if self.integer.get(name):
                        raw = np.round(raw)
                    elif name in self.decimals:
                        raw = np.round(raw, self.decimals[name])
                    # rounding must not step outside the observed range either
                    values = np.clip(raw, *bounds) if bounds is not None else raw
            out[name] = _assign(out[name], holes, values)
        return out


def _assign(column: pd.Series, holes: np.ndarray, values: np.ndarray) -> pd.Series:
    column = column.copy()
    dtype = column.dtype
    if pd.api.types.is_datetime64_any_dtype(dtype):
        values = pd.DatetimeIndex(values).as_unit(np.datetime_data(dtype)[0]
                                                  if not isinstance(dtype, pd.DatetimeTZDtype)
                                                  else dtype.unit)
        if isinstance(dtype, pd.DatetimeTZDtype):  # the seconds were UTC
            values = values.tz_localize("UTC").tz_convert(dtype.tz)
    elif pd.api.types.is_integer_dtype(dtype):
        values = values.astype("int64")
    elif pd.api.types.is_bool_dtype(dtype):
        values = values.astype(bool)
    elif pd.api.types.is_float_dtype(dtype):  # labels of a 0/1 column stored as floats
        values = np.asarray(values, dtype=float)
    elif pd.api.types.is_string_dtype(dtype) and not isinstance(dtype, pd.CategoricalDtype):
        values = np.asarray([str(v) for v in values], dtype=object)
    column.iloc[np.flatnonzero(holes)] = values
    return column.astype(dtype)


def with_derived(working: pd.DataFrame, kinds: Mapping[str, str]) -> pd.DataFrame:
    """Add datetime component and duration columns (features only) to a working frame.

    Named ``COLUMN__year``, ``COLUMN__month``, ``COLUMN__day_of_week``, ``COLUMN__hour`` and
    ``LATER__minus__EARLIER`` (hours between two datetime columns, in column order).
    """
    stamps = [name for name, kind in kinds.items() if kind == "datetime" and name in working]
    if not stamps:
        return working
    extra = {}
    for name in stamps:
        seconds = working[name].to_numpy(float)
        ok = np.isfinite(seconds)
        when = pd.DatetimeIndex(np.where(ok, seconds, 0).astype("int64").astype("datetime64[s]"))
        for part in _COMPONENTS:
            values = getattr(when, part).to_numpy(float)
            extra[f"{name}{DERIVED_SEP}{part}"] = np.where(ok, values, np.nan)
    for i, first in enumerate(stamps):
        for later in stamps[i + 1:]:
            hours = (working[later].to_numpy(float) - working[first].to_numpy(float)) / 3600.0
            extra[f"{later}{DERIVED_SEP}minus{DERIVED_SEP}{first}"] = hours
    return pd.concat([working, pd.DataFrame(extra, index=working.index)], axis=1)


def derived_from(name: str, columns: Sequence[str]) -> list[str]:
    """The derived feature columns made from ``name`` (never features of ``name``'s own model:
    at a hole of ``name`` they hold nothing but the start fill)."""
    prefix, suffix = f"{name}{DERIVED_SEP}", f"{DERIVED_SEP}minus{DERIVED_SEP}{name}"
    return [c for c in columns if c.startswith(prefix) or c.endswith(suffix)]
