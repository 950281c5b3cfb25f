"""The public surface is explicit: ``imputelab.__all__`` is exactly what it should be."""

import imputelab

EXPECTED = {
    "ColumnPlan", "DataError", "FillMethod", "FillReport", "ImputelabError", "OptionError",
    "Plan", "PlanError", "ScoreOptions", "Survey", "SurveyOptions", "Table", "TableIOError",
    "clean_with_plan", "fill_frame", "fill_table", "get_mask", "get_mask_names", "get_method",
    "get_method_names", "read_table", "score_table", "survey_table", "write_table",
    "FittedFill", "fit_plan", "PlanImputer", "PooledResult", "pool", "build_report",
    "write_report",
}


def test_all_is_the_public_surface():
    assert set(imputelab.__all__) == EXPECTED
    for name in imputelab.__all__:
        assert hasattr(imputelab, name), name


def test_every_error_is_an_imputelab_error():
    for cls in (imputelab.DataError, imputelab.OptionError, imputelab.PlanError,
                imputelab.TableIOError):
        assert issubclass(cls, imputelab.ImputelabError)
