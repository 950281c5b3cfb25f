"""Missing not at random: the chance a cell is hidden depends on its own value."""

from __future__ import annotations

from typing import ClassVar

import numpy as np
import pandas as pd

from imputelab.masks.base import (
    ColumnDraw,
    Mask,
    check_strength,
    pick_by_score,
    standardized_effect,
)

__all__ = ["MNARMask"]


class MNARMask(Mask):
    """Hide cells with a probability that rises with the cell's own value.

    The column is turned into a standardized value ``z`` over its observed cells:
    numeric columns are z-scored, so high values go missing more often; categorical
    columns give each category a random ``N(0, 1)`` effect, z-scored over the observed
    rows, so some categories go missing more than others. Putting categories on the same
    unit scale as numeric values makes ``strength`` mean the same logit spread for both.
    The hiding probability is ``p = sigmoid(a + strength * z)`` with ``a`` solved so
    that the mean of ``p`` over the observed cells equals the rate, and exactly ``k``
    cells are drawn by weighted sampling without replacement (Efraimidis & Spirakis,
    2006). A categorical column with a single observed category is masked uniformly.

    Parameters
    ----------
    strength : float, default 2.0
        Logit slope per standard deviation of the own value; 0 gives a uniformly random
        mask, negative values make low values go missing.
    """

    name: ClassVar[str] = "mnar"

    def __init__(self, strength: float = 2.0) -> None:
        self.strength = strength

    def _check_params(self) -> None:
        check_strength(self, self.strength)

    def _pick(self, X: pd.DataFrame, column: str, draw: ColumnDraw) -> tuple[np.ndarray, list[str]]:
        z = standardized_effect(X[column], draw.rng)[draw.observed]
        return pick_by_score(self.strength * z, draw), [column]
