"""Bad input at the command line: one line on stderr, exit code 2, nothing written.

The contract (cli/_common.py, errors.py): an error the user can fix is reported as exactly one
line ``imputelab: error: ...`` on stderr that names the file, column or option at fault, with
exit code 2, no traceback, no output file and no temporary ``*.part`` file left behind; the
input file is never modified.

``score`` runs with ``--quiet`` here, because its progress bar leaves a blank line on stderr
(a known bug, see test_score_error_is_one_line_without_quiet).
"""

from __future__ import annotations

import csv
import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from typer.testing import CliRunner, Result

from imputelab.bench.demo_data import make_trip_log, write_trip_log
from imputelab.cli import app

pytestmark = pytest.mark.usefixtures("single_blas_thread")


def invoke(*args: Any) -> Result:
    return CliRunner().invoke(app, [str(a) for a in args])


def assert_one_line_error(
    result: Result,
    *needles: str,
    out: Path | None = None,
    unchanged: dict[Path, bytes] | None = None,
) -> str:
    """Check the error contract; return the message line."""
    assert result.exit_code == 2, (result.exit_code, result.stdout, result.stderr)
    lines = result.stderr.splitlines()
    assert len(lines) == 1, lines
    line = lines[0]
    assert line.startswith("imputelab: error: "), line
    for needle in needles:
        assert needle in line, (needle, line)
    assert "Traceback" not in result.stdout + result.stderr
    assert result.stdout == ""
    if out is not None:
        assert not out.exists()
        assert [p.name for p in out.parent.iterdir() if p.name.endswith(".part")] == []
    for path, content in (unchanged or {}).items():
        assert path.read_bytes() == content, path
    return line


def snapshot(*paths: Path) -> dict[Path, bytes]:
    return {p: p.read_bytes() for p in paths}


def edited_plan(source: Path, folder: Path, edit: Callable[[dict[str, Any]], None]) -> Path:
    plan = json.loads(source.read_text(encoding="utf-8"))
    edit(plan)
    path = folder / "edited.json"
    path.write_text(json.dumps(plan, indent=2), encoding="utf-8")
    return path


# ------------------------------------------------------------------------------- bad files


def _write(path: Path, content: bytes) -> Path:
    path.write_bytes(content)
    return path


BAD_FILES: dict[str, tuple[Callable[[Path], Path], tuple[str, ...]]] = {
    "missing": (lambda d: d / "nowhere.csv", ("nowhere.csv", "no such file")),
    "folder": (lambda d: _mkdir(d / "folder.csv"), ("folder.csv", "folder")),
    "folder-without-extension": (lambda d: _mkdir(d / "tables"), ("tables",)),
    "empty": (lambda d: _write(d / "empty.csv", b""), ("empty.csv", "empty")),
    "header-only": (lambda d: _write(d / "header.csv", b"a,b,c\n"), ("header.csv", "no rows")),
    "unknown-extension": (lambda d: _write(d / "trips.txt", b"a,b\n1,2\n"),
                          ("trips.txt", ".txt")),
    # b"\xe9" is "é" in latin-1 and no valid UTF-8 sequence.
    "latin-1": (lambda d: _write(d / "latin.csv", "a,b\n1,café\n2,thé\n".encode("latin-1")),
                ("latin.csv", "UTF-8")),
    "duplicate-names": (lambda d: _write(d / "dup.csv", b"a,b,a\n1,2,3\n4,5,6\n"),
                        ("dup.csv", "duplicate", "a")),
}


def _mkdir(path: Path) -> Path:
    path.mkdir()
    return path


@pytest.mark.parametrize("case", list(BAD_FILES))
@pytest.mark.parametrize("command", ["survey", "score", "fill"])
def test_bad_input_file(case, command, tmp_path, trip_log_plan, fast_score_args):
    make, needles = BAD_FILES[case]
    path = make(tmp_path)
    before = snapshot(path) if path.is_file() else {}
    out = tmp_path / "out" / ("plan.json" if command == "score" else "filled.csv")
    out.parent.mkdir()
    if command == "survey":
        result = invoke("survey", path)
    elif command == "score":
        result = invoke("score", path, "--out", out, *fast_score_args, "-q")
    else:
        result = invoke("fill", path, "--plan", trip_log_plan, "--out", out)
    assert_one_line_error(result, *needles, out=out, unchanged=before)


def test_fill_output_with_unknown_extension(trip_log_csv, trip_log_plan, tmp_path):
    out = tmp_path / "filled.txt"
    result = invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", out)
    assert_one_line_error(result, "--out", "filled.txt", ".txt", out=out,
                          unchanged=snapshot(trip_log_csv))


# ----------------------------------------------------------------------------- bad options

OPTION_CASES: dict[str, tuple[list[str], tuple[str, ...]]] = {
    "kind-unknown-column": (["--kind", "nope=numeric"], ("--kind", "nope")),
    "code-unknown-column": (["--missing-code", "nope=99"], ("--missing-code", "nope")),
    "date-unknown-column": (["--date-format", "nope=%Y-%m-%d"], ("--date-format", "nope")),
    "target-unknown-column": (["--target", "nope"], ("--target", "nope")),
    "unknown-kind": (["--kind", "depot=colour"], ("--kind", "colour")),
    "kind-without-equals": (["--kind", "depot"], ("--kind", "depot")),
}


@pytest.mark.parametrize("case", list(OPTION_CASES))
@pytest.mark.parametrize("command", ["survey", "score"])
def test_bad_column_option(case, command, trip_log_csv, tmp_path, fast_score_args):
    args, needles = OPTION_CASES[case]
    before = snapshot(trip_log_csv)
    out = tmp_path / "plan.json"
    if command == "survey":
        result = invoke("survey", trip_log_csv, *args)
    else:
        result = invoke("score", trip_log_csv, "--out", out, *fast_score_args, "-q", *args)
    assert_one_line_error(result, *needles, out=out, unchanged=before)


SCORE_CASES: dict[str, tuple[list[str], tuple[str, ...]]] = {
    "rate-zero": (["--rate", "0"], ("--rate",)),
    "rate-above-one": (["--rate", "1.5"], ("--rate", "1.5")),
    "repeats-zero": (["--repeats", "0"], ("--repeats",)),
    "unknown-mask": (["--masks", "mcar,sideways"], ("--masks", "sideways")),
    "unknown-method": (["--methods", "mean,guesswork"], ("--methods", "guesswork")),
    "unknown-metric": (["--metric", "closeness"], ("closeness",)),
    "use-target-without-target": (["--use-target"], ("--use-target", "--target")),
}


@pytest.mark.parametrize("case", list(SCORE_CASES))
def test_bad_score_option(case, trip_log_csv, tmp_path, fast_score_args):
    args, needles = SCORE_CASES[case]
    out = tmp_path / "plan.json"
    # Later options win, so these override the cheap settings.
    result = invoke("score", trip_log_csv, "--out", out, *fast_score_args, "-q", *args)
    assert_one_line_error(result, *needles, out=out, unchanged=snapshot(trip_log_csv))


def test_unknown_metric_names_the_option(trip_log_csv, tmp_path, fast_score_args):
    out = tmp_path / "plan.json"
    result = invoke("score", trip_log_csv, "--out", out, *fast_score_args, "-q",
                    "--metric", "closeness")
    assert_one_line_error(result, "--metric", "closeness", out=out)


@pytest.mark.parametrize("args", [["--repeats", "0"], ["--kind", "nope=numeric"]],
                         ids=["option-check", "survey-check"])
def test_score_error_is_one_line_without_quiet(args, trip_log_csv, tmp_path, fast_score_args):
    out = tmp_path / "plan.json"
    result = invoke("score", trip_log_csv, "--out", out, *fast_score_args, *args)
    assert_one_line_error(result, args[0], out=out)


def test_methods_that_cannot_fill_a_column_kind_are_named(trip_log_csv, tmp_path,
                                                         fast_score_args):
    out = tmp_path / "plan.json"
    # No candidate can fill the label columns: score still succeeds, and those columns get a
    # plain default whose reason names the candidates that could not (exit 0, not a crash).
    result = invoke("score", trip_log_csv, "--out", out, *fast_score_args, "-q",
                    "--methods", "mean")
    assert result.exit_code == 0, result.stderr
    columns = json.loads(out.read_text())["columns"]
    for name in ("depot", "cargo_class"):
        assert columns[name]["method"] == "mode", columns[name]
        assert "no candidate method (mean)" in columns[name]["reason"], columns[name]
    assert columns["payload_kg"]["method"] == "mean"


@pytest.mark.parametrize("command", ["score", "fill"])
def test_out_equal_to_the_input_is_refused(command, trip_log_csv, trip_log_plan,
                                           fast_score_args):
    before = snapshot(trip_log_csv)
    mtime = trip_log_csv.stat().st_mtime_ns
    if command == "score":
        result = invoke("score", trip_log_csv, "--out", trip_log_csv, *fast_score_args, "-q")
    else:
        result = invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", trip_log_csv)
    assert_one_line_error(result, "--out", str(trip_log_csv), "input", unchanged=before)
    assert trip_log_csv.stat().st_mtime_ns == mtime
    parts = [p.name for p in trip_log_csv.parent.iterdir() if p.name.endswith(".part")]
    assert parts == []


def test_out_spelled_differently_is_still_the_input(trip_log_csv, trip_log_plan,
                                                    monkeypatch):
    monkeypatch.chdir(trip_log_csv.parent)
    before = snapshot(trip_log_csv)
    result = invoke("fill", "trips.csv", "--plan", trip_log_plan, "--out", "./sub/../trips.csv")
    assert_one_line_error(result, "--out", unchanged=before)


# --------------------------------------------------------------------------------- bad plans


def test_plan_from_another_file_needs_force(trip_log_csv, trip_log_plan, tmp_path):
    other = write_trip_log(tmp_path / "other.csv", n_trips=300, seed=5)
    before = snapshot(other, trip_log_plan)
    out = tmp_path / "filled.csv"
    result = invoke("fill", other, "--plan", trip_log_plan, "--out", out)
    assert_one_line_error(result, "--force", "other.csv", out=out, unchanged=before)

    forced = invoke("fill", other, "--plan", trip_log_plan, "--out", out, "--force", "--json")
    assert forced.exit_code == 0, forced.stderr
    report = json.loads(forced.stdout)
    assert any("different content" in w for w in report["warnings"])
    assert out.exists()
    assert snapshot(other, trip_log_plan) == before


def test_plan_with_other_columns(trip_log_csv, trip_log_plan, tmp_path):
    def rename(plan: dict[str, Any]) -> None:
        plan["columns"]["fuel_litres"] = plan["columns"].pop("fuel_l")

    plan = edited_plan(trip_log_plan, tmp_path, rename)
    out = tmp_path / "filled.csv"
    result = invoke("fill", trip_log_csv, "--plan", plan, "--out", out)
    assert_one_line_error(result, "fuel_litres", "fuel_l", out=out,
                          unchanged=snapshot(trip_log_csv))


def test_plan_of_unknown_version(trip_log_csv, trip_log_plan, tmp_path):
    plan = edited_plan(trip_log_plan, tmp_path, lambda p: p.update(version=99))
    out = tmp_path / "filled.csv"
    result = invoke("fill", trip_log_csv, "--plan", plan, "--out", out)
    assert_one_line_error(result, "edited.json", "99", out=out)


@pytest.mark.parametrize("content", [b"{not json", b"\xff\xfe\x00", b"[1, 2]", b""],
                         ids=["broken", "binary", "list", "empty"])
def test_plan_that_is_not_a_plan(content, trip_log_csv, tmp_path):
    plan = _write(tmp_path / "plan.json", content)
    out = tmp_path / "filled.csv"
    result = invoke("fill", trip_log_csv, "--plan", plan, "--out", out)
    assert_one_line_error(result, "--plan", "plan.json", out=out)


def test_plan_that_does_not_exist(trip_log_csv, tmp_path):
    out = tmp_path / "filled.csv"
    result = invoke("fill", trip_log_csv, "--plan", tmp_path / "nowhere.json", "--out", out)
    assert_one_line_error(result, "--plan", "nowhere.json", out=out)


def test_plan_with_an_invalid_action(trip_log_csv, trip_log_plan, tmp_path):
    plan = edited_plan(trip_log_plan, tmp_path,
                       lambda p: p["columns"]["depot"].update(action="guess"))
    out = tmp_path / "filled.csv"
    result = invoke("fill", trip_log_csv, "--plan", plan, "--out", out)
    assert_one_line_error(result, "depot", "guess", out=out)


def test_plan_method_that_cannot_fill_the_kind(trip_log_csv, trip_log_plan, tmp_path):
    # A mean of labels does not exist: "mean" on the categorical depot column.
    plan = edited_plan(trip_log_plan, tmp_path,
                       lambda p: p["columns"]["depot"].update(method="mean", params={}))
    out = tmp_path / "filled.csv"
    result = invoke("fill", trip_log_csv, "--plan", plan, "--out", out)
    assert_one_line_error(result, "depot", "mean", out=out, unchanged=snapshot(trip_log_csv))


# ------------------------------------------------------------------------ awkward columns


@pytest.fixture(scope="module")
def odd_columns(
    tmp_path_factory: pytest.TempPathFactory, fast_score_args: tuple[str, ...]
) -> tuple[Path, Path]:
    """The 300-row trip log plus an all-blank column and a constant one, and its plan."""
    folder = tmp_path_factory.mktemp("odd_columns")
    frame = make_trip_log(n_trips=300)
    frame["never_filled_in"] = ""
    frame["axle_count"] = "5"
    frame.loc[::10, "axle_count"] = ""  # 30 holes in a column with one value
    data = folder / "odd.csv"
    frame.to_csv(data, index=False)
    plan = folder / "plan.json"
    result = invoke("score", data, "--out", plan, *fast_score_args, "-q")
    assert result.exit_code == 0, result.stderr
    return data, plan


def test_all_missing_column_is_flagged_and_dropped(odd_columns):
    data, plan_path = odd_columns
    survey = json.loads(invoke("survey", data, "--json").stdout)
    assert survey["columns"]["never_filled_in"]["missing"] == 300
    assert survey["columns"]["never_filled_in"]["drop"] is True
    column = json.loads(plan_path.read_text())["columns"]["never_filled_in"]
    assert column["action"] == "drop"
    assert column["method"] is None


def test_all_missing_column_forced_to_impute_fails_fill(odd_columns, tmp_path):
    data, plan_path = odd_columns
    plan = edited_plan(plan_path, tmp_path, lambda p: p["columns"]["never_filled_in"].update(
        action="impute", method="mode", params={}))
    out = tmp_path / "filled.csv"
    result = invoke("fill", data, "--plan", plan, "--out", out)
    assert_one_line_error(result, "never_filled_in", out=out, unchanged=snapshot(data))


def test_constant_column_is_filled_with_its_value(odd_columns, tmp_path):
    data, plan_path = odd_columns
    column = json.loads(plan_path.read_text())["columns"]["axle_count"]
    assert column["action"] == "impute"
    assert "single distinct" in column["reason"]
    out = tmp_path / "filled.csv"
    result = invoke("fill", data, "--plan", plan_path, "--out", out, "--json")
    assert result.exit_code == 0, result.stderr
    assert json.loads(result.stdout)["filled"]["axle_count"] == 30
    with open(out, newline="", encoding="utf-8") as handle:
        values = {row["axle_count"] for row in csv.DictReader(handle)}
    assert values == {"5"}


SINGLE_ROW = b"weight_kg,colour,weighed_at\n1.5,red,2026-01-01 10:00\n"


def test_single_row_file_gets_a_method_per_column(tmp_path, fast_score_args):
    data = _write(tmp_path / "one.csv", SINGLE_ROW)
    plan_path = tmp_path / "plan.json"
    result = invoke("score", data, "--out", plan_path, *fast_score_args, "-q")
    assert result.exit_code == 0, result.stderr
    columns = json.loads(plan_path.read_text())["columns"]
    assert list(columns) == ["weight_kg", "colour", "weighed_at"]
    for name, col in columns.items():
        assert col["action"] == "impute", name
        assert col["method"], name
        assert col["scores"] == {}, name  # nothing can be hidden and scored in one row
    assert data.read_bytes() == SINGLE_ROW


def test_single_row_file_reason_says_too_few(tmp_path, fast_score_args):
    data = _write(tmp_path / "one.csv", SINGLE_ROW)
    plan_path = tmp_path / "plan.json"
    result = invoke("score", data, "--out", plan_path, *fast_score_args, "-q")
    assert result.exit_code == 0, result.stderr
    for name, col in json.loads(plan_path.read_text())["columns"].items():
        assert "too few" in col["reason"], (name, col["reason"])
