"""Missing at random: the chance a cell is hidden depends on other columns' values."""

from __future__ import annotations

from typing import ClassVar

import numpy as np
import pandas as pd

from imputelab.checks import check_count
from imputelab.masks.base import (
    ColumnDraw,
    Mask,
    check_strength,
    pick_by_score,
    standardized_effect,
)

__all__ = ["MARMask"]


class MARMask(Mask):
    """Hide cells with a probability driven by a few other columns.

    For each masked column ``j``, up to ``n_drivers`` driver columns are drawn at random
    from the *other* columns of ``X`` (all of them, not only the masked ones). Each driver
    ``d`` becomes a standardized value ``z_d``: numeric drivers are z-scored over their
    observed values; categorical drivers give each category a random ``N(0, 1)`` effect,
    z-scored over the observed rows. A missing driver value contributes 0. With random
    signs ``w_d = ±1`` the score is ``s_i = sum_d w_d z_{i,d}`` and the hiding probability
    ``p_i = sigmoid(a + strength * s_i)``, with ``a`` solved so that the mean of ``p`` over
    the observed cells of ``j`` equals the rate. Exactly ``k`` cells are then drawn by
    weighted sampling without replacement (Efraimidis & Spirakis, 2006).

    If ``X`` has no other column, the score is 0 and the mask is uniformly random.
    Pass ``info={}`` to :meth:`sample` to learn which drivers each column got.

    Parameters
    ----------
    strength : float, default 2.0
        Logit slope per unit of score; 0 gives a uniformly random mask, larger values
        tie the mask more tightly to the drivers.
    n_drivers : int, default 2
        Most driver columns per masked column (at least 1).
    """

    name: ClassVar[str] = "mar"

    def __init__(self, strength: float = 2.0, n_drivers: int = 2) -> None:
        self.strength = strength
        self.n_drivers = n_drivers

    def _check_params(self) -> None:
        check_strength(self, self.strength)
        check_count(self.n_drivers, "n_drivers")

    def _pick(self, X: pd.DataFrame, column: str, draw: ColumnDraw) -> tuple[np.ndarray, list[str]]:
        candidates = [c for c in X.columns if c != column]
        n = min(int(self.n_drivers), len(candidates))
        rng = draw.rng
        chosen = rng.choice(len(candidates), size=n, replace=False) if n else []
        drivers = [candidates[i] for i in chosen]
        signs = rng.choice(np.array([-1.0, 1.0]), size=n)
        score = np.zeros(draw.observed.size, dtype=float)
        for sign, driver in zip(signs, drivers, strict=True):
            score += sign * standardized_effect(X[driver], rng)[draw.observed]
        return pick_by_score(self.strength * score, draw), drivers
