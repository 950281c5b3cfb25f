"""Structural blanks: blanks that are not missing values, and blanks that stand for zero.

A *structural* blank is a cell left empty because the question does not apply: a house with
no pool has no pool quality, a dry trailer has no temperature setpoint. Imputing such a cell
invents a value for something that does not exist. :func:`find_structural_rules` looks for
rules that say when a column is blank:

``OTHER == value``   a number of another numeric column (``Pool.Area == 0``) or a label of a
                     binary/categorical column (``cargo_class == 'dry'``)
``OTHER in {...}``   a set of labels of a categorical column, each of whose rows are (almost)
                     all blank in the column
``OTHER is blank``   another column (of any kind) is blank in the same rows

For a rule with condition rows ``S`` and blank rows ``B`` of the column:

* ``support = |S & B|`` rows the rule explains,
* ``confidence = |S & B| / |S|``: when the condition holds, the column is blank,
* ``coverage = |S & B| / |B|``: the share of the column's blanks the rule explains,
* ``unexplained = |B| - |S & B|``: blanks outside the rule, most likely true missing values.

A rule is kept when ``support >= min_support``, ``confidence >= min_confidence``,
``coverage >= MIN_COVERAGE``, and "exactly when" also holds the other way round: the column
is clearly less often blank where the condition does not hold (``confidence - blank share
outside S >= MIN_SEPARATION``) and most of its filled cells lie outside the condition
(``|not S & not B| / |not B| >= MIN_FILLED_OUTSIDE``). The last two checks matter for
columns that are blank almost everywhere: a column blank in 99.6% of the rows is blank in over
95% of the rows of nearly any frequent condition, and such a condition says nothing about
*why* it is blank.

The search for rules lives in :mod:`.structural_rules`; it is re-exported here.
:func:`blank_means_zero` flags numeric columns that look as if zero was written as a blank,
and :func:`fill_value_for` gives the value a structural blank stands for.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from imputelab.errors import OptionError
from imputelab.io.columns import IMPUTABLE_KINDS
from imputelab.survey.diagnostics.structural_rules import (
    MAX_RULES,
    MIN_COVERAGE,
    MIN_FILLED_OUTSIDE,
    MIN_SEPARATION,
    StructuralRule,
    _as_float,
    _check_inputs,
    _plain,
    _shown,
    find_structural_rules,
)

__all__ = [
    "ABSENT_LABEL",
    "MAX_RULES",
    "MIN_COVERAGE",
    "MIN_FILLED_OUTSIDE",
    "MIN_SEPARATION",
    "StructuralRule",
    "ZeroHint",
    "blank_means_zero",
    "fill_value_for",
    "find_structural_rules",
]

#: blank_means_zero: the smallest observed value must be at most this share of the spread
#: from the minimum to the 95th percentile (common practice, no source). A 5% share would
#: also flag right-skewed measurements such as weights (a smallest payload of 820 kg against
#: a 95th percentile of 23,000 kg is 3.6%); values that really start at zero (minutes the
#: door stood open, smallest 0.1 against 31) sit far below 1%.
ZERO_NEAR = 0.01
#: blank_means_zero: at least this many blanks and this share of the rows (common practice,
#: no source): a handful of blanks is more likely lost readings than unwritten zeros.
ZERO_MIN_BLANKS = 10
ZERO_MIN_BLANK_SHARE = 0.05
#: blank_means_zero: observed values needed to judge where the values start.
ZERO_MIN_OBSERVED = 10

#: The category a structural blank of a binary/categorical column becomes: "not applicable
#: or absent" (the Ames data documentation writes such levels as e.g. "No Pool", from memory).
ABSENT_LABEL = "absent"


@dataclass(frozen=True)
class ZeroHint:
    """A numeric column whose blanks may stand for zero.

    Attributes
    ----------
    column : str
        The column.
    blanks : int
        Its blank cells.
    minimum : float
        Its smallest observed value (above zero: the column holds no zeros).
    text : str
        The hint as a sentence.
    """

    column: str
    blanks: int
    minimum: float
    text: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict: ``blanks``, ``minimum`` and ``text``."""
        return {"blanks": int(self.blanks), "minimum": _plain(self.minimum), "text": self.text}


def blank_means_zero(typed: pd.DataFrame, kinds: Mapping[str, str]) -> dict[str, ZeroHint]:
    """Numeric columns whose blanks may be zeros that were never written.

    A column gets a hint when it has blanks, no zeros at all among its observed values, an
    observed minimum of at least zero that is small next to the spread
    (``min <= ZERO_NEAR * (p95 - min)``, ``p95`` numpy's default linear quantile), and at
    least :data:`ZERO_MIN_BLANKS` blanks making up at least :data:`ZERO_MIN_BLANK_SHARE` of
    the rows. These thresholds are common practice, no source: a count of minutes or
    litres that starts just above zero and has no zeros while many cells are empty most
    likely wrote "none" as a blank. Columns with negative values, or whose values start far
    from zero (a year, a length of 21 feet or more), get no hint.

    Parameters
    ----------
    typed : DataFrame
        The survey's typed frame (or a working frame).
    kinds : mapping of str to str
        Kind of each column; only ``"numeric"`` columns are checked.

    Returns
    -------
    dict of str to ZeroHint
        Columns with a hint, in table order.

    Raises
    ------
    DataError, OptionError
        For the inputs :func:`find_structural_rules` refuses (its thresholds aside).

    Examples
    --------
    >>> frame = pd.DataFrame({"minutes": [None] * 20 + [0.5 + i for i in range(100)]})
    >>> blank_means_zero(frame, {"minutes": "numeric"})["minutes"].text
    'no zeros among 100 observed values and the smallest is 0.5: a blank may mean zero'
    """
    _check_inputs(typed, kinds)
    n = len(typed)
    out: dict[str, ZeroHint] = {}
    for name in typed.columns:
        if kinds.get(name) != "numeric":
            continue
        numbers = _as_float(typed[name], name)
        blank = ~np.isfinite(numbers)
        n_blank = int(blank.sum())
        if n_blank < ZERO_MIN_BLANKS or n_blank < ZERO_MIN_BLANK_SHARE * n:
            continue
        observed = numbers[~blank]
        if observed.size < ZERO_MIN_OBSERVED:
            continue
        low = float(observed.min())
        if low <= 0.0:  # zeros present, or negative values: blanks are not unwritten zeros
            continue
        high = float(np.quantile(observed, 0.95))
        if low > ZERO_NEAR * (high - low):
            continue
        text = (f"no zeros among {observed.size:,} observed values and the smallest is "
                f"{_shown(low)}: a blank may mean zero")
        out[name] = ZeroHint(column=name, blanks=n_blank, minimum=low, text=text)
    return out


def fill_value_for(
    rule: StructuralRule | None, kind: str, *, means_zero: bool = False
) -> float | str:
    """The value a structural blank stands for.

    * binary/categorical: :data:`ABSENT_LABEL` (``"absent"``), a new label meaning "not
      applicable / absent" (the Ames data documentation writes such levels as "No Pool",
      "No Garage", from memory); a binary column then holds three labels.
    * numeric: ``0.0`` when the rule's condition is ``OTHER == 0`` (no pool area, so no
      pool anything) or when ``means_zero`` is set (the column got a
      :func:`blank_means_zero` hint; ``rule`` may then be ``None``). Otherwise ``nan``:
      nothing the column can hold stands for "does not apply" (a dry trailer's setpoint
      is not 0 degrees), so the cell is best left blank rather than imputed.
    * datetime: ``nan`` for the same reason.

    Parameters
    ----------
    rule : StructuralRule or None
        The column's best rule (the first of its list), or ``None``.
    kind : str
        The column's kind.
    means_zero : bool, default False
        The column's blanks look like unwritten zeros.

    Returns
    -------
    float or str

    Raises
    ------
    OptionError
        When ``kind`` is not one of numeric, binary, categorical, datetime.

    Examples
    --------
    >>> rule = StructuralRule("Pool.QC", "Pool.Area", "==", (0.0,), 2917, 1.0, 1.0, 0)
    >>> fill_value_for(rule, "categorical"), fill_value_for(rule, "numeric")
    ('absent', 0.0)
    """
    if kind not in IMPUTABLE_KINDS:
        raise OptionError(
            f"kind must be one of {', '.join(IMPUTABLE_KINDS)} to stand in for a blank, "
            f"got '{kind}'"
        )
    if kind in ("binary", "categorical"):
        return ABSENT_LABEL
    if kind == "numeric" and (means_zero or _zero_valued(rule)):
        return 0.0
    return math.nan


def _zero_valued(rule: StructuralRule | None) -> bool:
    if rule is None or rule.op != "==" or len(rule.values) != 1:
        return False
    value = rule.values[0]
    return isinstance(value, int | float) and not isinstance(value, bool) and value == 0
