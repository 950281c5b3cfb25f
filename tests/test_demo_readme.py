"""The demo end to end, held to the numbers the README quotes from it.

The README's outputs were pasted from a real run of ``imputelab demo`` and the commands shown
after it. This module runs the demo once with its full default settings (the one slow test of
the suite) and checks that the file, the survey, the plan and the fill it writes give the
numbers printed there, so a change that moves them fails here until the README is re-pasted.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest
from cli_helpers import invoke, load, ok

from imputelab.bench.demo_data import DEMO_COLUMNS

README = Path(__file__).resolve().parents[1] / "README.md"


def readme_block(command: str) -> str:
    """The text block of the README whose first line is ``$ command``."""
    text = README.read_text(encoding="utf-8")
    start = text.index(f"$ {command}\n")
    return text[start:text.index("```", start)]


def table_rows(block: str) -> dict[str, list[str]]:
    """The rows of a rich table in ``block``: first cell -> cells (wrapped lines joined)."""
    rows: dict[str, list[str]] = {}
    last = None
    for line in block.splitlines():
        if not line.startswith("│"):
            continue
        cells = [c.strip() for c in line.strip("│").split("│")]
        if cells[0]:
            last = cells[0]
            rows[last] = cells
        elif last is not None:  # a wrapped line continues the row above
            rows[last] = [f"{a} {b}".strip() for a, b in zip(rows[last], cells, strict=True)]
    return rows


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("demo") / "imputelab-demo"
    ok(invoke("demo", "--out", folder, "--quiet"))
    return folder


@pytest.fixture(scope="module")
def survey(demo: Path) -> dict[str, Any]:
    # The README's survey is run without --missing-code, as a new user would run it first.
    return json.loads(ok(invoke("survey", demo / "trips.csv", "--json")).stdout)


def test_demo_writes_every_file(demo):
    names = {"trips.csv", "survey.json", "plan.json", "trips_filled.csv", "report.html"}
    assert names <= {p.name for p in demo.iterdir()}
    plan = load(demo / "plan.json")
    assert plan["columns"]["spoiled"]["action"] == "exclude"  # the demo's target
    assert plan["columns"]["driver_rating"]["cleaning"]["missing_codes"] == [99]


def test_survey_table_is_what_the_readme_shows(survey):
    block = readme_block("imputelab survey imputelab-demo/trips.csv")
    rows, columns = survey["rows"], survey["columns"]
    assert f"trips.csv: {rows} rows, {len(columns)} columns" in block
    shown = {name: cells for name, cells in table_rows(block).items() if name != "column"}
    assert list(shown) == list(DEMO_COLUMNS) == list(columns)
    for name, cells in shown.items():
        col = columns[name]
        assert cells[1] == col["kind"], name
        assert int(cells[2]) == col["missing"], name
        assert cells[3] == f"{col['missing_fraction']:.1%}", name
        tokens = ", ".join(f"'{t}' x{c}" for t, c in col["tokens"].items())
        assert cells[4] == tokens, name
        assert (cells[5] == "DROP") == col["drop"], name


def test_survey_evidence_is_what_the_readme_shows(survey):
    block = readme_block("imputelab survey imputelab-demo/trips.csv")
    test = survey["mcar_test"]
    found = re.search(r"Little's MCAR test on (\d+) numeric columns: d² = ([\d.]+), df = (\d+), "
                      r"p = ([\d.e-]+), (\d+) patterns", block)
    assert found is not None
    assert int(found[1]) == len(test["columns"])
    assert float(found[2]) == pytest.approx(test["statistic"], abs=0.05)
    assert int(found[3]) == test["df"]
    assert float(found[4]) == pytest.approx(test["p_value"], abs=1e-3)
    assert int(found[5]) == test["patterns"]
    patterns = survey["patterns"]
    assert (f"Patterns of blanks: {patterns['n_patterns']} distinct; complete rows "
            f"{patterns['complete_rows']} of {survey['rows']}.") in block
    listed = re.findall(r"^ +(\d+)  (.+)$", block, flags=re.M)
    assert listed, "the README lists the commonest patterns"
    for (count, names), pattern in zip(listed, patterns["patterns"], strict=False):
        assert int(count) == pattern["rows"]
        assert names == (", ".join(pattern["missing"]) or "(complete)")


def test_fill_table_is_what_the_readme_shows(demo):
    block = readme_block("imputelab fill imputelab-demo/trips.csv --plan plan.json "
                         "--out trips_filled.csv")
    shown = {n: cells for n, cells in table_rows(block).items() if n != "column"}
    plan = load(demo / "plan.json")
    out = demo / "trips_filled_again.csv"
    result = ok(invoke("fill", demo / "trips.csv", "--plan", demo / "plan.json", "--out", out,
                       "--json"))
    report = json.loads(result.stdout)
    assert {n: (c[1], int(c[2])) for n, c in shown.items()} == {
        n: (report["methods"][n], count) for n, count in report["filled"].items()}
    for name, (method, _) in {n: (c[1], c[2]) for n, c in shown.items()}.items():
        assert plan["columns"][name]["method"] == method, name
    assert out.read_bytes() == (demo / "trips_filled.csv").read_bytes()


def test_score_table_is_what_the_readme_shows(demo):
    # The README's score command is the demo's own (the 99 code confirmed, target spoiled,
    # default settings), so the demo's plan.json is the plan it printed.
    block = readme_block("imputelab score imputelab-demo/trips.csv --out plan.json "
                         "--missing-code driver_rating=99 --target spoiled")
    plan = load(demo / "plan.json")
    methods = plan["settings"]["methods"]
    lines = [line.split() for line in block.splitlines()
             if line.startswith(" ") and line.split()
             and line.split()[0] in plan["columns"]]
    assert lines, "the README shows the selection scores"
    for cells in lines:
        name, metric, *values = cells
        col = plan["columns"][name]
        scores = {m: col["scores"][m][metric] for m in methods if m in col["scores"]}
        *shown, held = values
        assert len(shown) == len(scores), name
        chosen = [m for m, v in zip(scores, shown, strict=True) if v.endswith("*")]
        assert chosen == [col["method"]], name
        for (method, value), text in zip(scores.items(), shown, strict=True):
            assert float(text.rstrip("*")) == pytest.approx(value, abs=5e-4), (name, method)
        assert float(held) == pytest.approx(col["expected_error"]["score"], abs=5e-4), name
    assert (f"Rows with the target 'spoiled' missing: "
            f"{plan['source']['target_missing_rows']}") in block
