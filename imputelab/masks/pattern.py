"""Replayed patterns: hide cells in the row shapes the table's own holes take."""

from __future__ import annotations

import math
from typing import ClassVar

import numpy as np
import pandas as pd

from imputelab.checks import check_count
from imputelab.errors import DataError
from imputelab.masks.base import MIN_OBSERVED, Mask, hidden_count

__all__ = ["PatternMask"]


class PatternMask(Mask):
    """Copy the missingness patterns of the incomplete rows onto other rows.

    A row's *pattern* is the set of ``columns`` that are missing in it. The donors are the
    incomplete rows (at least one hole in ``columns``); the recipients are the complete rows,
    or every row when fewer than ``min_complete_rows`` rows are complete (a table such as
    the Ames housing data has none). ``R = hidden_count(n_recipients, rate)`` recipients are
    drawn uniformly without replacement, and each gets the pattern of a donor row drawn
    uniformly with replacement, which is a draw from the empirical pattern distribution.
    The recipient's *observed* cells in that pattern are hidden; when recipients are all
    rows, an incomplete recipient loses only the part of the pattern it still has, possibly
    nothing.

    ``rate`` here is the share of *recipient rows* that receive a pattern, not the share of
    each column's observed cells as in the other masks: a column's hidden count is about
    ``R`` times the share of donors missing it, so columns that are rarely missing in the
    table are rarely hidden, as in the table.

    Each column keeps at least ``max(2, ceil(0.1 * n_observed))`` observed cells, and a
    column with fewer than :data:`~imputelab.masks.base.MIN_OBSERVED` observed cells gets
    none hidden (the rule of :func:`~imputelab.masks.base.hidden_count`). Where replayed
    patterns would break this, randomly chosen hidden cells of the column are shown again,
    which leaves those rows with part of their pattern. With complete rows as recipients
    the cap on ``R`` already keeps enough cells, so this only happens when recipients are
    all rows.

    Limits, plainly: the *shape* of the holes is realistic (which columns go missing
    together, and how often), but *which rows* get them is not. Recipients are chosen
    uniformly at random, so the replayed holes are missing completely at random given
    their shape, whatever mechanism made the real holes; if the real holes depend on
    values (MAR or MNAR), this mask does not reproduce that dependence. The complete rows
    may also differ from the incomplete ones for the same reason, so scores measure how
    well the holes are filled on rows like the complete ones. Use the ``mar`` and ``mnar``
    masks to see how methods fare when hiding depends on values.

    Parameters
    ----------
    min_complete_rows : int, default 30
        Fewest complete rows for them to be the recipients; below it, every row is one
        (at least 1).
    """

    name: ClassVar[str] = "pattern"

    def __init__(self, min_complete_rows: int = 30) -> None:
        self.min_complete_rows = min_complete_rows

    def _check_params(self) -> None:
        check_count(self.min_complete_rows, "min_complete_rows")

    def _hide(self, X: pd.DataFrame, cols: list[str], rate: float, rng: np.random.Generator,
              info: dict[str, list[str]] | None) -> np.ndarray:
        """Replay the table's row patterns (see the class notes; ``rate`` is a share of rows).

        ``info`` gets ``[]`` for every column: which cells are hidden does not depend on
        values. Raises :class:`~imputelab.errors.DataError` when ``cols`` have no missing
        cell at all, so there is no pattern to replay.
        """
        holes = X[cols].isna().to_numpy()
        incomplete = holes.any(axis=1)
        donors = np.flatnonzero(incomplete)
        if donors.size == 0:
            raise DataError(
                "mask 'pattern': the columns to mask have no missing values, so there is no "
                "missingness pattern to replay; use another mask (for example mcar)"
            )
        recipients = np.flatnonzero(~incomplete)
        if recipients.size < self.min_complete_rows:
            recipients = np.arange(len(X))

        n_rows = hidden_count(recipients.size, rate)
        chosen = rng.choice(recipients, size=n_rows, replace=False)
        donor = donors[rng.integers(donors.size, size=n_rows)]
        hidden = np.zeros(holes.shape, dtype=bool)
        hidden[chosen] = holes[donor] & ~holes[chosen]

        n_observed = (~holes).sum(axis=0)
        # math.ceil on the same float product as hidden_count, so both agree on every n.
        cap = [
            n - max(2, math.ceil(0.1 * n)) if n >= MIN_OBSERVED else 0 for n in n_observed.tolist()
        ]
        excess = hidden.sum(axis=0) - np.asarray(cap, dtype=int)
        for j in np.flatnonzero(excess > 0):
            rows = np.flatnonzero(hidden[:, j])
            hidden[rng.choice(rows, size=int(excess[j]), replace=False), j] = False

        if info is not None:
            for col in cols:
                info[col] = []
        return hidden
