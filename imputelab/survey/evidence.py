"""What the blanks mean: the survey's evidence about every column's missing cells.

One pass over the typed table gathers what the diagnostics in :mod:`imputelab.survey.diagnostics`
can say:

* Little's MCAR test on the numeric columns;
* the pattern table and the pairs of columns most often blank together;
* per column, whether the other columns predict its blanks (cross-validated AUC);
* per column, rules that say a blank is *structural* (``Pool.QC`` is blank exactly when
  ``Pool.Area == 0``) and hints that a blank stands for zero.

The survey reports it, the plan carries it into every column's reason, and a structural
column is filled with the constant its rule stands for rather than with a model.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from imputelab.executors.pool import Executor, JoblibExecutor
from imputelab.frame.encoding import Encoding, derived_from, with_derived
from imputelab.io.columns import IMPUTABLE_KINDS, ColumnSpec
from imputelab.survey.diagnostics import (
    LittleTest,
    MissingnessCheck,
    PatternTable,
    StructuralRule,
    ZeroHint,
    blank_means_zero,
    co_missingness,
    find_structural_rules,
    little_mcar_test,
    missing_patterns,
    missingness_predictability,
    top_co_missing,
)

__all__ = ["MAX_PATTERNS_SHOWN", "Evidence", "gather_evidence"]

#: Patterns listed in the survey (the count of the rest is reported).
MAX_PATTERNS_SHOWN = 15


@dataclass
class Evidence:
    """Everything the diagnostics found about a table's blanks.

    Attributes
    ----------
    mcar_test : LittleTest
        Little's test on the numeric columns.
    patterns : PatternTable
        Row patterns of blank cells over the columns that may be filled.
    co_missing : list of dict
        Pairs of columns most often blank together (phi).
    missingness : dict
        Per column with blanks: can the other columns predict them.
    structural : dict
        Per column: rules saying when a blank is not a missing value, best first.
    zero_hints : dict
        Per numeric column whose blanks may be unwritten zeros.
    """

    mcar_test: LittleTest
    patterns: PatternTable
    co_missing: list[dict[str, Any]] = field(default_factory=list)
    missingness: dict[str, MissingnessCheck] = field(default_factory=dict)
    structural: dict[str, list[StructuralRule]] = field(default_factory=dict)
    zero_hints: dict[str, ZeroHint] = field(default_factory=dict)

    def unexplained(self, name: str, missing: int) -> int:
        """Blanks of ``name`` that no structural rule explains (its true missing values)."""
        rules = self.structural.get(name)
        return rules[0].unexplained if rules else missing

    def column_dict(self, name: str) -> dict[str, Any]:
        """The per-column part of the survey's JSON output."""
        check = self.missingness.get(name)
        hint = self.zero_hints.get(name)
        return {
            "missingness": None if check is None else check.to_dict(),
            "structural": [rule.to_dict() for rule in self.structural.get(name, [])],
            "hints": [] if hint is None else [hint.text],
        }

    def table_dict(self) -> dict[str, Any]:
        """The table-wide part of the survey's JSON output."""
        return {
            "mcar_test": self.mcar_test.to_dict(),
            "patterns": self.patterns.to_dict(),
            "co_missing": list(self.co_missing),
        }


#: Rows the predictability check uses (a stratified sample of larger tables): enough for an
#: AUC to within a few hundredths, and the survey stays quick on big files.
PREDICTABILITY_ROWS = 5000


def _predictability_task(features: pd.DataFrame, drop: list[str], missing: np.ndarray,
                         seed: int) -> MissingnessCheck:
    """One column's check: ``features`` is shared by every task, less the column's own."""
    return missingness_predictability(features.drop(columns=drop), missing, random_state=seed,
                                      max_rows=PREDICTABILITY_ROWS)


def gather_evidence(
    typed: pd.DataFrame,
    specs: Mapping[str, ColumnSpec],
    *,
    seed: int = 0,
    n_jobs: int = 1,
    target: str | None = None,
    executor: Executor | None = None,
) -> Evidence:
    """Run every diagnostic on a typed table.

    Parameters
    ----------
    typed : DataFrame
        The survey's cleaned table.
    specs : mapping
        Every column's cleaning spec (its kind above all).
    seed : int, default 0
        Seed of the cross-validated classifiers.
    n_jobs : int, default 1
        Columns checked in parallel in local processes (joblib), when no ``executor`` is
        given.
    target : str, optional
        The column a later model predicts. It may show that blanks depend on the outcome
        (a predictability driver), but never makes a blank structural: a rule on the target
        would fill a feature by its value.
    executor : Executor, optional
        Where the per-column predictability checks run (:mod:`imputelab.executors.pool`:
        this process, local processes or a Dask cluster); by default ``n_jobs`` local
        processes. The evidence does not depend on it: each check's seed is ``seed``.

    Returns
    -------
    Evidence
    """
    kinds = {name: spec.kind for name, spec in specs.items()}
    usable = [n for n in typed.columns if kinds[n] in IMPUTABLE_KINDS]
    numeric = [n for n in usable if kinds[n] == "numeric"]
    blanks = typed[usable].isna()

    mcar = little_mcar_test(typed[numeric].astype("float64"))
    patterns = missing_patterns(blanks, max_patterns=MAX_PATTERNS_SHOWN)
    with np.errstate(invalid="ignore", divide="ignore"):
        co_missing = top_co_missing(co_missingness(blanks)) if usable else []
    rest = [n for n in typed.columns if n != target]
    structural = find_structural_rules(typed[rest], {n: kinds[n] for n in rest})
    zero_hints = blank_means_zero(typed, kinds)

    missingness = _predictability(typed, kinds, usable, blanks, seed=seed,
                                  executor=executor or JoblibExecutor(n_jobs))
    return Evidence(mcar_test=mcar, patterns=patterns, co_missing=co_missing,
                    missingness=missingness, structural=structural, zero_hints=zero_hints)


def _predictability(typed: pd.DataFrame, kinds: Mapping[str, str], usable: list[str],
                    blanks: pd.DataFrame, *, seed: int,
                    executor: Executor) -> dict[str, MissingnessCheck]:
    """Every column with blanks checked against the others, one task a column."""
    holed = [n for n in usable if blanks[n].any()]
    if not holed or len(usable) < 2:
        return {}
    encoding = Encoding.fit(typed, {n: kinds[n] for n in usable})
    features = with_derived(encoding.encode(typed), encoding.kinds)
    tasks = [([name, *derived_from(name, list(features.columns))], blanks[name].to_numpy(),
              seed) for name in holed]
    checks = executor.map(_predictability_task, features, tasks)
    return {name: _named(check, usable) for name, check in zip(holed, checks, strict=True)}


def _named(check: MissingnessCheck, columns: list[str]) -> MissingnessCheck:
    """Drivers named after the table's columns (``departed_at (hour)`` for a derived one)."""
    if not check.drivers:
        return check
    shown = []
    for driver in check.drivers:
        base, sep, part = driver.partition("__")
        if sep and base in columns and part and "__" not in part:
            shown.append(f"{base} ({part.replace('_', ' ')})")
        elif sep and "__minus__" in driver:
            later, _, earlier = driver.partition("__minus__")
            shown.append(f"{later} - {earlier} (hours)")
        else:
            shown.append(driver)
    return MissingnessCheck(auc=check.auc, auc_low=check.auc_low, auc_high=check.auc_high,
                            drivers=shown, verdict=check.verdict, n_missing=check.n_missing,
                            n_rows=check.n_rows, caution=check.caution)
