"""imputelab: survey a table's holes, test imputation methods against hidden truth, write a
per-column plan, and fill files the same way.

Filled values are estimates, not measurements.

Examples
--------
>>> import imputelab
>>> sorted(imputelab.get_method_names())[:3]
['chained-boosted', 'chained-forest', 'chained-linear']
"""

from imputelab.errors import DataError, ImputelabError, OptionError, PlanError, TableIOError
from imputelab.fill.frame import (
    FillReport,
    FittedFill,
    clean_with_plan,
    fill_frame,
    fill_table,
    fit_plan,
)
from imputelab.fill.pooling import PooledResult, pool
from imputelab.fill.transformer import PlanImputer
from imputelab.io.tables import Table, read_table, write_table
from imputelab.masks import get_mask, get_mask_names
from imputelab.methods import FillMethod, get_method, get_method_names
from imputelab.report.page import build_report, write_report
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.plan import ColumnPlan, Plan
from imputelab.survey.table import Survey, SurveyOptions, survey_table

__all__ = [
    "ColumnPlan",
    "DataError",
    "FillMethod",
    "FillReport",
    "FittedFill",
    "ImputelabError",
    "OptionError",
    "Plan",
    "PlanError",
    "PlanImputer",
    "PooledResult",
    "ScoreOptions",
    "Survey",
    "SurveyOptions",
    "Table",
    "TableIOError",
    "build_report",
    "clean_with_plan",
    "fill_frame",
    "fill_table",
    "fit_plan",
    "get_mask",
    "get_mask_names",
    "get_method",
    "get_method_names",
    "pool",
    "read_table",
    "score_table",
    "survey_table",
    "write_report",
    "write_table",
]
