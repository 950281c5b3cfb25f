"""Rules that say when a column is blank: the search behind :mod:`.structural`.

See :mod:`imputelab.survey.diagnostics.structural` for the forms of rule, the counts a rule
carries and the checks it must pass. Here the candidate conditions are built one OTHER
column at a time and counted against every column's blanks with matrix products.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from imputelab.checks import check_count
from imputelab.errors import DataError, OptionError
from imputelab.io.columns import IMPUTABLE_KINDS, KINDS, blank_mask

__all__ = [
    "MAX_RULES",
    "MIN_COVERAGE",
    "MIN_FILLED_OUTSIDE",
    "MIN_SEPARATION",
    "StructuralRule",
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
    :mod:`imputelab.survey.diagnostics.structural`).

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
    check_count(min_support, "min_support")
    check_count(max_levels, "max_levels")
    scan = _count(typed, kinds, min_support=min_support, max_levels=max_levels)
    if scan is None:
        return {}
    found: dict[int, list[StructuralRule]] = {j: [] for j in scan.targets}
    _single_rules(found, scan, min_confidence, min_support)
    _set_rules(found, scan, min_confidence, min_support)
    return _ranked(found, scan.names)


@dataclass(frozen=True, eq=False)
class _Scan:
    """Every candidate condition counted against every target column's blanks."""

    names: list[str]
    targets: list[int]  # positions of the columns with blanks, in table order
    cond: _Conditions
    both: np.ndarray  # |S & B|, (conditions, targets)
    s_size: np.ndarray  # |S|, (conditions,)
    b_size: np.ndarray  # |B|, (targets,)
    n: int

    @property
    def target_pos(self) -> np.ndarray:
        return np.asarray(self.targets)


def _count(typed: pd.DataFrame, kinds: Mapping[str, str], *, min_support: int,
           max_levels: int) -> _Scan | None:
    """The counts of every condition and target, or None when there is nothing to count."""
    n = len(typed)
    names = list(typed.columns)
    blanks = [blank_mask(typed[name]) if name in kinds else np.zeros(n, bool)
              for name in names]
    targets = [j for j, name in enumerate(names)
               if kinds.get(name) in IMPUTABLE_KINDS and 0 < int(blanks[j].sum()) < n]
    if not targets:
        return None
    b_matrix = np.column_stack([blanks[j] for j in targets]).astype(np.float64)
    cond = _build_conditions(typed, kinds, blanks, b_matrix, min_support=min_support,
                             max_levels=max_levels)
    if not len(cond):
        return None
    both, s_size = cond.counts()
    return _Scan(names=names, targets=targets, cond=cond, both=both, s_size=s_size,
                 b_size=b_matrix.sum(axis=0), n=n)


def _ranked(found: dict[int, list[StructuralRule]],
            names: list[str]) -> dict[str, list[StructuralRule]]:
    """Each column's best :data:`MAX_RULES` rules, columns without a rule left out."""
    drivers = {
        names[j]: {(r.other, r.op, r.values) for r in rules if r.op != "is blank"}
        for j, rules in found.items()
    }
    out: dict[str, list[StructuralRule]] = {}
    for j, rules in found.items():
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


def _add_rule(found: dict[int, list[StructuralRule]], scan: _Scan, t: int, *, other: int,
              op: str, values: tuple[Any, ...], support: int, confidence: float,
              coverage: float) -> None:
    """Record a kept rule for target ``t`` (an index into ``scan.targets``)."""
    j = scan.targets[t]
    found[j].append(StructuralRule(
        column=scan.names[j], other=scan.names[other], op=op, values=values,
        support=support, confidence=float(confidence), coverage=float(coverage),
        unexplained=int(scan.b_size[t]) - support,
    ))


def _single_rules(found: dict[int, list[StructuralRule]], scan: _Scan,
                  min_confidence: float, min_support: int) -> None:
    """Rules of one condition each: ``OTHER == value`` and ``OTHER is blank``."""
    both, cond = scan.both, scan.cond
    confidence, coverage, keep = _passes(both, scan.s_size[:, None], scan.b_size[None, :],
                                         scan.n, min_confidence, min_support)
    keep &= np.asarray(cond.owner)[:, None] != scan.target_pos[None, :]
    for k, t in zip(*np.nonzero(keep), strict=True):
        value = cond.value[k]
        _add_rule(found, scan, int(t), other=cond.owner[k], op=cond.op[k],
                  values=() if value is None else (value,), support=int(both[k, t]),
                  confidence=confidence[k, t], coverage=coverage[k, t])


def _set_rules(found: dict[int, list[StructuralRule]], scan: _Scan,
               min_confidence: float, min_support: int) -> None:
    """Rules ``OTHER in {...}``: the labels of OTHER whose rows are (almost) all blank."""
    for position, first, labels in scan.cond.groups:
        rows = slice(first, first + len(labels))
        level_both = scan.both[rows]                   # (levels, targets)
        level_size = scan.s_size[rows][:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            level_conf = np.where(level_size > 0, level_both / level_size, 0.0)
        member = level_conf >= min_confidence          # levels (almost) all blank
        count = member.sum(axis=0)
        support = (level_both * member).sum(axis=0)
        size = (level_size * member).sum(axis=0)
        confidence, coverage, keep = _passes(support, size, scan.b_size, scan.n,
                                             min_confidence, min_support)
        # One label is the "==" rule already.
        keep &= (count >= 2) & (scan.target_pos != position)
        for t in np.flatnonzero(keep):
            levels = np.flatnonzero(member[:, t])
            ordered = sorted(levels, key=lambda i, t=t: (-level_both[i, t], str(labels[i])))
            _add_rule(found, scan, int(t), other=position, op="in",
                      values=tuple(labels[i] for i in ordered), support=int(support[t]),
                      confidence=confidence[t], coverage=coverage[t])
