"""Which columns are filled, which only serve as features, and their working frame."""

from __future__ import annotations

from collections.abc import Mapping

import pandas as pd

from imputelab.frame.encoding import Encoding
from imputelab.io.columns import IMPUTABLE_KINDS, ColumnSpec

__all__ = ["default_action", "working_setup"]


def default_action(kind: str, *, drop: bool, is_target: bool) -> str:
    """``drop`` when flagged, ``exclude`` for text, identifiers and the target, else ``impute``."""
    if drop:
        return "drop"
    if is_target or kind not in IMPUTABLE_KINDS:
        return "exclude"
    return "impute"


def working_setup(
    typed: pd.DataFrame,
    specs: Mapping[str, ColumnSpec],
    actions: Mapping[str, str],
    *,
    target: str | None = None,
    use_target: bool = False,
) -> tuple[list[str], Encoding]:
    """Columns to fill and the encoding of every column the methods may use.

    The target joins the working frame as a feature only with ``use_target``; it is never
    filled. Dropped, text and identifier columns take no part.

    Returns
    -------
    targets : list of str
        Columns to fill, in table order.
    encoding : Encoding
        Fitted on ``typed``; its columns are the targets plus the target column when used.
    """
    targets = [n for n in typed.columns if actions.get(n) == "impute" and n != target]
    used = [n for n in typed.columns
            if n in targets or (use_target and n == target and specs[n].kind in IMPUTABLE_KINDS)]
    kinds = {n: specs[n].kind for n in used}
    encoding = Encoding.fit(
        typed, kinds,
        integer={n: specs[n].integer for n in used},
        date_formats={n: specs[n].date_format for n in used},
        decimals={n: specs[n].decimals for n in used
                  if specs[n].kind == "numeric" and not specs[n].integer},
    )
    return targets, encoding
