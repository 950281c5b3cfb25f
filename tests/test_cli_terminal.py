"""Terminal and machine output of survey, score, fill and report.

The contract: ``--quiet`` prints nothing at all unless there is an error; ``--json`` prints
one JSON document and nothing else on stdout (the ``--json`` tests of each command parse the
whole of stdout with ``json.loads``: tests/test_cli.py for survey, score and fill,
tests/test_report.py for report). Progress bars go to stderr and only on a terminal.
"""

from __future__ import annotations

import json

import pytest
from cli_helpers import invoke, load, ok

pytestmark = pytest.mark.usefixtures("single_blas_thread")


def test_survey_quiet_prints_nothing(trip_log_csv):
    result = ok(invoke("survey", trip_log_csv, "--no-checks", "--quiet"))
    assert result.stdout == "" and result.stderr == ""


def test_survey_json_is_the_whole_of_stdout_without_checks(trip_log_csv):
    result = ok(invoke("survey", trip_log_csv, "--no-checks", "--json"))
    assert json.loads(result.stdout)["rows"] == 300
    assert result.stderr == ""


def test_fill_quiet_prints_nothing(trip_log_csv, trip_log_plan, tmp_path):
    out = tmp_path / "filled.csv"
    result = ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", out, "-q"))
    assert result.stdout == "" and result.stderr == ""
    assert out.is_file()


def test_score_report_is_the_report_of_its_plan(trip_log_csv, tmp_path, fast_score_args):
    plan, page = tmp_path / "plan.json", tmp_path / "scored.html"
    result = ok(invoke("score", trip_log_csv, "--out", plan, *fast_score_args,
                       "--report", page, "--quiet"))
    assert result.stdout == "" and result.stderr == ""
    assert load(plan)["format"] == "imputelab-plan"
    # The report command surveys the file again, read as the plan says; it must come to the
    # very page score wrote from its own survey.
    again = tmp_path / "again.html"
    ok(invoke("report", trip_log_csv, "--plan", plan, "--out", again, "--jobs", "1", "-q"))
    assert again.read_bytes() == page.read_bytes()


def test_score_report_over_the_plan_is_refused(trip_log_csv, tmp_path, fast_score_args):
    plan = tmp_path / "plan.json"
    result = invoke("score", trip_log_csv, "--out", plan, *fast_score_args, "--report",
                    trip_log_csv, "-q")
    assert result.exit_code == 2
    (line,) = result.stderr.splitlines()
    assert "--report" in line and "input" in line
    assert not plan.exists()


def test_report_prints_one_closing_line(trip_log_plan, tmp_path):
    out = tmp_path / "r.html"
    result = ok(invoke("report", trip_log_plan.parent / "trips.csv", "--plan", trip_log_plan,
                       "--out", out, "--no-checks"))
    (line,) = result.stdout.splitlines()
    assert line.startswith(f"Report written to {out}") and "estimates" in line
    assert "Not run: the survey's checks were switched off" in out.read_text("utf-8")


def test_file_text_in_square_brackets_is_printed_not_read_as_console_markup():
    # A reason quoting the experiment as "[experiment: ...]" and a column named "[b]x" once
    # vanished from the terminal tables: rich read them as style tags.
    from imputelab.cli._common import out
    from imputelab.cli.score import plan_rich_table
    from imputelab.score.plan import ColumnPlan, Plan

    plan = Plan(source={}, settings={}, columns={"[b]x": ColumnPlan(
        kind="numeric", missing_fraction=0.1, action="impute", method="mean",
        reason="rule [experiment: knn won] kept")})
    with out.capture() as captured:
        out.print(plan_rich_table(plan))
    text = " ".join(captured.get().split())
    assert "[b]x" in text
    assert "[experiment: knn won]" in text
