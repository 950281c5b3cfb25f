"""The text of filled cells: how a CSV fill writes a filled number or timestamp.

Observed cells keep the exact text of the file; a filled cell is written like its column:
the column's number of decimals and decimal mark, whole numbers for integer columns, the
column's own timestamp format.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from imputelab.io.columns import ColumnSpec
from imputelab.io.tables import Table

__all__ = ["render_text"]


def render_text(
    table: Table, before: pd.DataFrame, after: pd.DataFrame, specs: Mapping[str, ColumnSpec]
) -> pd.DataFrame:
    """The original text of a CSV table with only the filled cells rewritten.

    Observed cells keep their exact text; filled numbers are written with the column's own
    number of decimals and decimal mark, timestamps in the column's own format.
    """
    out = table.frame[list(after.columns)].copy()
    for name in after.columns:
        if name not in specs or name not in before.columns:
            continue
        holes = before[name].isna().to_numpy() & after[name].notna().to_numpy()
        if not holes.any():
            continue
        values = after[name].to_numpy()[holes]
        text = [_format(v, specs[name], table.decimal) for v in values]
        column = out[name].copy()
        column.iloc[np.flatnonzero(holes)] = text
        out[name] = column
    return out


def _format(value: Any, spec: ColumnSpec, decimal: str) -> str:
    if spec.kind == "datetime":
        stamp = pd.Timestamp(value)
        return stamp.strftime(spec.date_format) if spec.date_format else stamp.isoformat()
    if spec.kind == "numeric" or isinstance(value, float | np.floating | int | np.integer):
        if spec.integer or (isinstance(value, int | np.integer)):
            return str(int(round(float(value))))
        text = f"{float(value):.{spec.decimals}f}" if spec.decimals else repr(float(value))
        return text.replace(".", ",") if decimal == "," else text
    return str(value)
