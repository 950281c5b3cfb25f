"""Diagnostics of missing cells: what the blanks of a table say about how they arose.

Takes plain frames or arrays (the survey's typed frame and column kinds, never survey
objects) and gives frozen results with ``to_dict()``: Little's MCAR test on EM estimates
(``mcar_test``, ``em``), the pattern table and co-missingness (``patterns``), how well the
other columns predict each column's blanks (``predictability``), and blanks that are not
missing values, with the value they stand for (``structural``, ``structural_rules``).
"""

from __future__ import annotations

from imputelab.survey.diagnostics.mcar_test import EMResult, LittleTest, em_mvn, little_mcar_test
from imputelab.survey.diagnostics.patterns import (
    PatternTable,
    co_missingness,
    missing_patterns,
    top_co_missing,
)
from imputelab.survey.diagnostics.predictability import (
    CAUTION,
    VERDICTS,
    MissingnessCheck,
    hanley_mcneil_se,
    missingness_predictability,
)
from imputelab.survey.diagnostics.structural import (
    ABSENT_LABEL,
    StructuralRule,
    ZeroHint,
    blank_means_zero,
    fill_value_for,
    find_structural_rules,
)

__all__ = [
    "ABSENT_LABEL",
    "CAUTION",
    "VERDICTS",
    "EMResult",
    "LittleTest",
    "MissingnessCheck",
    "PatternTable",
    "StructuralRule",
    "ZeroHint",
    "blank_means_zero",
    "co_missingness",
    "em_mvn",
    "fill_value_for",
    "find_structural_rules",
    "hanley_mcneil_se",
    "little_mcar_test",
    "missing_patterns",
    "missingness_predictability",
    "top_co_missing",
]
