"""Missing completely at random: every observed cell is equally likely to be hidden."""

from __future__ import annotations

from typing import ClassVar

import numpy as np
import pandas as pd

from imputelab.masks.base import ColumnDraw, Mask

__all__ = ["MCARMask"]


class MCARMask(Mask):
    """Hide uniformly random observed cells, independently of any value.

    Each column gets its own draw (``rng.choice`` without replacement) of
    :func:`~imputelab.masks.base.hidden_count` cells among its observed cells.
    """

    name: ClassVar[str] = "mcar"

    def __init__(self) -> None:
        pass

    def _pick(self, X: pd.DataFrame, column: str, draw: ColumnDraw) -> tuple[np.ndarray, list[str]]:
        return draw.rng.choice(draw.observed, size=draw.k, replace=False), []
