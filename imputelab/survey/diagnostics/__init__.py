"""Diagnostics of missing cells: what the blanks of a table say about how they arose.

* :mod:`~imputelab.survey.diagnostics.mcar_test`: Little's (1988) MCAR test with EM estimates.
* :mod:`~imputelab.survey.diagnostics.predictability`: can the other columns predict a blank.
* :mod:`~imputelab.survey.diagnostics.patterns`: the pattern table and pairwise co-missingness.
* :mod:`~imputelab.survey.diagnostics.structural`: blanks that are not missing values.
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
