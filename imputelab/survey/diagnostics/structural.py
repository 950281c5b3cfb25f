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

from imputelab.errors import DataError, OptionError
from imputelab.io.columns import IMPUTABLE_KINDS, KINDS, blank_mask

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

#: A rule must explain at least this share of the column's blanks (common practice, no
#: source): below half, the column's blanks are mostly something else.
MIN_COVERAGE = 0.5
#: Confidence minus the blank share where the condition does not hold (common practice, no
#: source): "blank exactly when" needs the column to be mostly filled outside the condition.
MIN_SEPARATION = 0.5
#: Share of the column's filled cells that must lie where the condition does not hold
#: (common practice, no source): a condition true on nearly every row (a roof material other
#: than one rare kind) leaves a handful of rows outside it, and those few may all be filled by
#: chance; the column's filled cells must sit mostly outside the condition as well.
MIN_FILLED_OUTSIDE = 0.5
#: Rules reported per column, best first.
MAX_RULES = 3

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

# Ties in score and support go to the simpler rule: one value, then another column's blanks,
# then a set of labels.
_OP_RANK = {"==": 0, "is blank": 1, "in": 2}


@dataclass(frozen=True)
class StructuralRule:
    """A rule saying when a column is blank because the value does not apply.

    Attributes
    ----------
    column : str
        The column whose blanks the rule explains.
    other : str
        The column the condition is on.
    op : {"==", "is blank", "in"}
        The condition's form.
    values : tuple
        The number or label for ``"=="``, the labels for ``"in"``, empty for ``"is blank"``.
    support : int
        Blank rows of ``column`` where the condition holds.
    confidence : float
        Share of the condition's rows where ``column`` is blank.
    coverage : float
        Share of ``column``'s blanks where the condition holds.
    unexplained : int
        Blanks of ``column`` where the condition does not hold: likely true missing values.
    """

    column: str
    other: str
    op: str
    values: tuple[Any, ...]
    support: int
    confidence: float
    coverage: float
    unexplained: int

    @property
    def when(self) -> str:
        """The condition as text, e.g. ``"Pool.Area == 0"`` or ``"kind in {'a', 'b'}"``."""
        if self.op == "is blank":
            return f"{self.other} is blank"
        if self.op == "==":
            return f"{self.other} == {_shown(self.values[0])}"
        return f"{self.other} in {{{', '.join(_shown(v) for v in self.values)}}}"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict: ``when``, ``other``, ``op``, ``values``, counts and shares."""
        return {
            "when": self.when,
            "other": self.other,
            "op": self.op,
            "values": [_plain(v) for v in self.values],
            "support": int(self.support),
            "confidence": round(float(self.confidence), 6),
            "coverage": round(float(self.coverage), 6),
            "unexplained": int(self.unexplained),
        }


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


def _plain(value: Any) -> Any:
    if isinstance(value, float) and value.is_integer():
        return int(value)
    return value


def _shown(value: Any) -> str:
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() else repr(value)
    return repr(value)


def _check_inputs(typed: pd.DataFrame, kinds: Mapping[str, str]) -> None:
    if not isinstance(typed, pd.DataFrame):
        raise DataError(f"expected a pandas DataFrame, got {type(typed).__name__}")
    known = set(typed.columns)
    for name, kind in kinds.items():
        if name not in known:
            raise DataError(f"kinds: column '{name}' not found in the table")
        if kind not in KINDS:
            raise OptionError(
                f"kinds: '{kind}' for column '{name}' is not one of {', '.join(KINDS)}"
            )


def _as_float(column: pd.Series, name: str) -> np.ndarray:
    try:
        return column.to_numpy(dtype=float, na_value=np.nan)
    except (TypeError, ValueError) as exc:
        raise DataError(f"numeric column '{name}' holds values that are not numbers") from exc


class _Conditions:
    """Candidate conditions (``OTHER == value`` / ``OTHER is blank``) and their counts.

    Each OTHER column's indicators are multiplied with the blank matrix as soon as they are
    made, so memory stays at one column's block (a wide table of label columns would
    otherwise hold rows x conditions floats at once).
    """

    def __init__(self, b_matrix: np.ndarray) -> None:
        self.b_matrix = b_matrix
        self.owner: list[int] = []  # position of OTHER in the frame
        self.op: list[str] = []
        self.value: list[Any] = []
        # Categorical OTHER: (position of OTHER, first condition index, labels), for "in".
        self.groups: list[tuple[int, int, list[Any]]] = []
        self._both: list[np.ndarray] = []
        self._size: list[np.ndarray] = []

    def __len__(self) -> int:
        return len(self.op)

    def add(self, indicators: list[np.ndarray], owner: int, op: str, values: list[Any]) -> None:
        # float64 sums of 0/1 are exact far beyond any table's size.
        block = np.column_stack(indicators).astype(np.float64)
        self._both.append(block.T @ self.b_matrix)        # |S & B| per (condition, target)
        self._size.append(block.sum(axis=0))              # |S|
        self.owner.extend([owner] * len(values))
        self.op.extend([op] * len(values))
        self.value.extend(values)

    def counts(self) -> tuple[np.ndarray, np.ndarray]:
        """``|S & B|`` of shape (conditions, targets) and ``|S|`` of shape (conditions,)."""
        return np.vstack(self._both), np.concatenate(self._size)


def _build_conditions(
    typed: pd.DataFrame,
    kinds: Mapping[str, str],
    blanks: list[np.ndarray],
    b_matrix: np.ndarray,
    *,
    min_support: int,
    max_levels: int,
) -> _Conditions:
    n = len(typed)
    cond = _Conditions(b_matrix)
    for j, name in enumerate(typed.columns):
        kind = kinds.get(name)
        if kind is None:
            continue
        blank = blanks[j]
        n_blank = int(blank.sum())
        if 0 < n_blank < n:
            cond.add([blank], j, "is blank", [None])
        if kind == "numeric":
            numbers = _as_float(typed[name], name)
            finite = numbers[np.isfinite(numbers)]
            if not finite.size:
                continue
            # Only zero and the mode: a condition on a rare value cannot reach min_support,
            # and scanning every distinct float would find coincidences.
            levels, counts = np.unique(finite, return_counts=True)
            picked = []
            zero = np.flatnonzero(levels == 0.0)
            if zero.size and counts[zero[0]] >= min_support:
                picked.append(0.0)
            mode = int(np.argmax(counts))  # np.unique sorts: ties go to the smallest value
            if counts[mode] >= min_support and float(levels[mode]) not in picked:
                picked.append(float(levels[mode]))
            if picked:
                cond.add([numbers == value for value in picked], j, "==", picked)
        elif kind in ("binary", "categorical"):
            codes, labels = pd.factorize(typed[name], sort=True)
            # A label column with many levels is closer to text: a rule on one of its levels
            # would mostly be chance.
            if len(labels) == 0 or len(labels) > max_levels:
                continue
            codes = np.where(blank, -1, codes)
            level_labels = [_builtin(v) for v in labels]
            first = len(cond)
            cond.add([codes == code for code in range(len(labels))], j, "==", level_labels)
            cond.groups.append((j, first, level_labels))
    return cond


def _builtin(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    return value


def find_structural_rules(
    typed: pd.DataFrame,
    kinds: Mapping[str, str],
    *,
    min_confidence: float = 0.95,
    min_support: int = 10,
    max_levels: int = 20,
) -> dict[str, list[StructuralRule]]:
    """Find rules that say when a column is blank because its value does not apply.

    Every numeric, binary, categorical or datetime column with blanks is checked against
    conditions on the other columns: ``OTHER == value`` for zero and the most frequent value
    of numeric columns and for every label of binary/categorical columns, ``OTHER in {...}``
    for a union of such labels, and ``OTHER is blank`` for a column of any kind. The counts
    come from matrix products of condition indicators with blank indicators, one OTHER column
    at a time. Beside ``min_support`` and ``min_confidence`` a rule must pass the module's
    :data:`MIN_COVERAGE`, :data:`MIN_SEPARATION` and :data:`MIN_FILLED_OUTSIDE` checks (see
    the module docstring).

    Parameters
    ----------
    typed : DataFrame
        The survey's typed frame (or a working frame).
    kinds : mapping of str to str
        Kind of each column; columns without a kind are not used.
    min_confidence : float, default 0.95
        Smallest share of the condition's rows that must be blank (common practice, no
        source: "almost always", leaving room for a few entry errors).
    min_support : int, default 10
        Fewest blank rows the rule must explain (common practice, no source).
    max_levels : int, default 20
        Label columns with more distinct labels than this are not used as conditions.

    Returns
    -------
    dict of str to list of StructuralRule
        Columns with at least one rule, in table order, each with at most
        :data:`MAX_RULES` rules, best first: by ``coverage * confidence``, then support,
        then the simpler form. An ``OTHER is blank`` rule that only repeats a driver both
        columns share (``Garage.Qual`` and ``Garage.Type`` are both blank when
        ``Garage.Area == 0``) comes after the observed-value rules: it copies OTHER's true
        missing values along with its structural blanks.

    Raises
    ------
    DataError
        When ``typed`` is not a DataFrame, a kind names an unknown column or a numeric
        column holds non-numbers.
    OptionError
        When a kind is unknown or a threshold is out of range.

    Examples
    --------
    >>> frame = pd.DataFrame({"area": [0.0] * 12 + [40.0, 55.0, 60.0],
    ...                       "quality": [None] * 12 + ["good", "fair", "good"]})
    >>> rules = find_structural_rules(frame, {"area": "numeric", "quality": "categorical"})
    >>> [rule.when for rule in rules["quality"]]
    ['area == 0']
    """
    _check_inputs(typed, kinds)
    if not 0.0 < min_confidence <= 1.0:
        raise OptionError(f"min_confidence must be in (0, 1], got {min_confidence}")
    if isinstance(min_support, bool) or not isinstance(min_support, int) or min_support < 1:
        raise OptionError(f"min_support must be a whole number >= 1, got {min_support!r}")
    if isinstance(max_levels, bool) or not isinstance(max_levels, int) or max_levels < 1:
        raise OptionError(f"max_levels must be a whole number >= 1, got {max_levels!r}")

    n = len(typed)
    names = list(typed.columns)
    blanks = [blank_mask(typed[name]) if name in kinds else np.zeros(n, bool)
              for name in names]
    targets = [j for j, name in enumerate(names)
               if kinds.get(name) in IMPUTABLE_KINDS and 0 < int(blanks[j].sum()) < n]
    if not targets:
        return {}
    b_matrix = np.column_stack([blanks[j] for j in targets]).astype(np.float64)
    b_size = b_matrix.sum(axis=0)                      # |B|
    cond = _build_conditions(typed, kinds, blanks, b_matrix, min_support=min_support,
                             max_levels=max_levels)
    if not len(cond):
        return {}
    both, s_size = cond.counts()
    owner = np.asarray(cond.owner)
    target_pos = np.asarray(targets)

    found: dict[int, list[StructuralRule]] = {j: [] for j in targets}
    _single_rules(found, cond, both, s_size, b_size, owner, target_pos, n, names,
                  min_confidence, min_support)
    _set_rules(found, cond, both, s_size, b_size, target_pos, n, names,
               min_confidence, min_support)

    drivers = {
        names[j]: {(r.other, r.op, r.values) for r in rules if r.op != "is blank"}
        for j, rules in found.items()
    }
    out: dict[str, list[StructuralRule]] = {}
    for j in targets:
        rules = found[j]
        if not rules:
            continue
        mine = drivers[names[j]]

        def key(rule: StructuralRule, mine: set = mine) -> tuple:
            implied = rule.op == "is blank" and bool(mine & drivers.get(rule.other, set()))
            return (implied, -rule.coverage * rule.confidence, -rule.support,
                    _OP_RANK[rule.op], names.index(rule.other), repr(rule.values))

        out[names[j]] = sorted(rules, key=key)[:MAX_RULES]
    return out


def _passes(support: np.ndarray, s_size: np.ndarray, b_size: np.ndarray, n: int,
            min_confidence: float, min_support: int) -> tuple[np.ndarray, ...]:
    """Confidence, coverage and the keep mask for arrays of candidate rules."""
    with np.errstate(divide="ignore", invalid="ignore"):
        confidence = np.where(s_size > 0, support / s_size, 0.0)
        coverage = support / b_size
        rest = n - s_size
        outside = np.where(rest > 0, (b_size - support) / np.where(rest > 0, rest, 1), 1.0)
        filled = n - b_size
        filled_outside = np.where(filled > 0,
                                  (filled - (s_size - support)) / np.where(filled > 0, filled, 1),
                                  0.0)
    keep = ((support >= min_support) & (confidence >= min_confidence)
            & (coverage >= MIN_COVERAGE) & (rest > 0)
            & (confidence - outside >= MIN_SEPARATION)
            & (filled_outside >= MIN_FILLED_OUTSIDE))
    return confidence, coverage, keep


def _single_rules(found, cond, both, s_size, b_size, owner, target_pos, n, names,
                  min_confidence, min_support) -> None:
    confidence, coverage, keep = _passes(both, s_size[:, None], b_size[None, :], n,
                                         min_confidence, min_support)
    keep &= owner[:, None] != target_pos[None, :]
    for k, t in zip(*np.nonzero(keep), strict=True):
        value = cond.value[k]
        support = int(both[k, t])
        j = int(target_pos[t])
        found[j].append(StructuralRule(
            column=names[j],
            other=names[cond.owner[k]],
            op=cond.op[k],
            values=() if value is None else (value,),
            support=support,
            confidence=float(confidence[k, t]),
            coverage=float(coverage[k, t]),
            unexplained=int(b_size[t]) - support,
        ))


def _set_rules(found, cond, both, s_size, b_size, target_pos, n, names,
               min_confidence, min_support) -> None:
    for position, first, labels in cond.groups:
        rows = slice(first, first + len(labels))
        level_both = both[rows]                        # (levels, targets)
        level_size = s_size[rows][:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            level_conf = np.where(level_size > 0, level_both / level_size, 0.0)
        member = level_conf >= min_confidence          # levels (almost) all blank
        count = member.sum(axis=0)
        support = (level_both * member).sum(axis=0)
        size = (level_size * member).sum(axis=0)
        confidence, coverage, keep = _passes(support, size, b_size, n, min_confidence,
                                             min_support)
        # One label is the "==" rule already.
        keep &= (count >= 2) & (target_pos != position)
        for t in np.flatnonzero(keep):
            levels = np.flatnonzero(member[:, t])
            ordered = sorted(levels, key=lambda i, t=t: (-level_both[i, t], str(labels[i])))
            j = int(target_pos[t])
            total = int(support[t])
            found[j].append(StructuralRule(
                column=names[j],
                other=names[position],
                op="in",
                values=tuple(labels[i] for i in ordered),
                support=total,
                confidence=float(confidence[t]),
                coverage=float(coverage[t]),
                unexplained=int(b_size[t]) - total,
            ))


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
    DataError
        When ``typed`` is not a DataFrame, a kind names an unknown column or a numeric
        column holds non-numbers.
    OptionError
        When a kind is unknown.

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
