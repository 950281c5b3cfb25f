"""The HTML report: self-contained, complete, escaped, reproducible, and readable in a browser.

The page is checked as a reader's browser sees it: real headless Chromium (Debian's
``chromium``) takes a screenshot, with every network path closed (see ECOSYSTEM_NOTES: a
proxy on a dead loopback port), and the HTML itself must hold no address to fetch.
"""

from __future__ import annotations

import json
import re
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_helpers import invoke, load, ok
from threadpoolctl import threadpool_limits

from imputelab.bench.demo_data import write_trip_log
from imputelab.io.tables import read_table
from imputelab.report.page import SECTIONS, build_report, survey_options_for
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.plan import Plan
from imputelab.survey.table import SurveyOptions, survey_table

CHROMIUM = "/usr/bin/chromium"
# ../shared/ECOSYSTEM_NOTES.md: headless as root, a fresh profile, and every network path shut
# (without the proxy flags Chromium resolves names even for a local file).
CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update",
                  "--disable-sync", "--proxy-server=127.0.0.1:9",
                  "--proxy-bypass-list=<-loopback>", "--hide-scrollbars")


@pytest.fixture(scope="module")
def made(trip_log_plan, tmp_path_factory) -> tuple[Path, dict]:
    """The report of the session's 300-row trip log plan, and the command's JSON."""
    out = tmp_path_factory.mktemp("report") / "report.html"
    with threadpool_limits(limits=1):
        result = ok(invoke("report", trip_log_plan.parent / "trips.csv", "--plan",
                           trip_log_plan, "--out", out, "--jobs", "1", "--json"))
    return out, json.loads(result.stdout)  # the whole of stdout is one JSON document


@pytest.fixture(scope="module")
def page(made) -> str:
    return made[0].read_text(encoding="utf-8")


def section(page: str, anchor: str) -> str:
    start = page.index(f'<section id="{anchor}"')
    return page[start:page.index("</section>", start)]


class Headings(HTMLParser):
    """Text of every h2, tags stripped."""

    def __init__(self) -> None:
        super().__init__()
        self.found: list[str] = []
        self._inside = False

    def handle_starttag(self, tag, attrs):
        if tag == "h2":
            self._inside = True
            self.found.append("")

    def handle_endtag(self, tag):
        if tag == "h2":
            self._inside = False

    def handle_data(self, data):
        if self._inside:
            self.found[-1] += data


def test_report_json_says_what_was_written(made, page):
    out, info = made
    assert info["out"] == str(out)
    assert info["bytes"] == out.stat().st_size
    assert info["sections"] == [title for _, title, _ in SECTIONS]
    assert info["charts"] == page.count("<svg") > 10
    assert [p.name for p in out.parent.iterdir()] == ["report.html"]  # no .part left


def test_every_section_heading_is_there_in_order(page):
    parser = Headings()
    parser.feed(page)
    expected = ["1 Overview", "2 Where the holes are", "3 The experiment",
                "4 What filling does", "5 Diagnostics", "6 Cautions"]
    assert [" ".join(h.split()) for h in parser.found] == expected


def test_the_page_references_nothing_outside_itself(page):
    # matplotlib's SVG root declares xmlns="http://www.w3.org/2000/svg" and the xlink
    # namespace: names of XML vocabularies, never fetched. Everything else must be local.
    without_ns = re.sub(r'xmlns(:\w+)?="[^"]*"', "", page)
    assert not re.search(r"https?://", without_ns, flags=re.I)
    assert not re.search(r"<script|<link|<iframe|<object|<embed|@import|<img", page, re.I)
    assert not re.search(r"\bsrc\s*=", page, re.I)
    for target in re.findall(r'href\s*=\s*"([^"]*)"', page):
        assert target.startswith("#"), target
    for target in re.findall(r"url\(([^)]*)\)", page):
        assert target.startswith("#"), target
    assert "Content-Security-Policy" in page and "default-src 'none'" in page


def test_every_chart_has_a_text_alternative_and_unique_ids(page):
    charts = page.count("<svg")
    assert page.count('role="img"><title>') == charts
    assert page.count("<figcaption>") == charts
    ids = re.findall(r'\sid="([^"]+)"', page)
    assert len(ids) == len(set(ids))


def test_one_experiment_chart_per_scored_column(page, trip_log_plan):
    plan = load(trip_log_plan)
    scored = [n for n, c in plan["columns"].items() if c["scores"] and c["action"] == "impute"]
    part = section(page, "experiment")
    assert part.count("<svg") == len(scored)
    for name in scored:
        assert f"<code>{name}</code>" in part
        assert plan["columns"][name]["reason"] in part.replace("&#x27;", "'")


def test_filling_section_shows_every_column_with_holes(page, trip_log_plan):
    plan = load(trip_log_plan)
    part = section(page, "filling")
    # The demo's planted structural blank (demo_data.PLANTED): setpoint_c is filled by
    # its rule; every imputed column with a blank in the file gets a chart.
    holed = [n for n, c in plan["columns"].items()
             if c["action"] == "impute" and c["missing_fraction"] > 0]
    assert part.count("<svg") == len(holed)
    assert "setpoint_c: observed and filled values" in part


def test_cautions_say_estimates_mnar_and_review(page):
    text = section(page, "cautions")
    for needle in ("estimates, not measurements", "MNAR", "Record the plan",
                   "qualified"):
        assert needle in text


def test_print_style_breaks_pages_and_keeps_backgrounds_light(page):
    css = page[page.index("<style>"):page.index("</style>")]
    printed = css[css.index("@media print"):]
    assert re.search(r"section\{[^}]*break-before:page", printed)
    assert "figure,table" in printed and "break-inside:avoid" in printed
    # No dark background anywhere (screen or print): every background colour is light.
    for colour in re.findall(r"background(?:-color)?:\s*(#[0-9a-fA-F]{3,6})", css):
        digits = colour[1:] if len(colour) == 7 else "".join(c * 2 for c in colour[1:])
        r, g, b = (int(digits[i:i + 2], 16) for i in (0, 2, 4))
        # Relative luminance, WCAG 2.x definition without gamma (a coarse bound suffices).
        assert 0.2126 * r + 0.7152 * g + 0.0722 * b > 200, colour


def screenshot(path: Path, png: Path, profile: Path, height: int) -> None:
    done = subprocess.run(
        [CHROMIUM, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", f"--screenshot={png}",
         f"--window-size=1200,{height}", path.resolve().as_uri()],
        capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    assert png.is_file() and png.stat().st_size > 0


@pytest.mark.skipif(not Path(CHROMIUM).exists(),
                    reason="Debian's chromium is not installed (.ci/run installs it)")
def test_the_report_renders_in_headless_chromium(made, tmp_path):
    from PIL import Image

    top, tall = tmp_path / "top.png", tmp_path / "tall.png"
    screenshot(made[0], top, tmp_path / "profile-1", 2000)
    pixels = np.asarray(Image.open(top).convert("RGB"))
    assert pixels.shape == (2000, 1200, 3)
    assert pixels.std() > 10  # not one flat colour
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 50  # text, rules, tables
    # Further down, the charts: the map's blank cells are Okabe-Ito blue (#0072B2), a colour
    # nothing but a chart uses in such quantity.
    screenshot(made[0], tall, tmp_path / "profile-2", 6000)
    pixels = np.asarray(Image.open(tall).convert("RGB")).astype(int)
    blue = np.abs(pixels - np.array([0x00, 0x72, 0xB2])).sum(axis=2) < 12
    assert blue.sum() > 5000


def test_file_derived_text_is_escaped(tmp_path):
    rng = np.random.default_rng(3)
    n = 80
    evil = "<script>alert(1)</script>"
    values = rng.normal(size=n)
    values[rng.choice(n, 12, replace=False)] = np.nan
    labels = rng.choice(np.array(["<b>bold</b>", "x&y", "plain"]), n).astype(object)
    labels[rng.choice(n, 8, replace=False)] = None
    frame = pd.DataFrame({"a": rng.normal(size=n), evil: values, "label": labels})
    path = tmp_path / "evil.csv"
    frame.to_csv(path, index=False)
    table = read_table(path)
    options = ScoreOptions(methods=["mean", "mode"], repeats=1, masks=["mcar"], n_jobs=1)
    with threadpool_limits(limits=1):
        plan, survey, _ = score_table(table, options)
        html = build_report(table, plan, survey=survey)
    assert "<script" not in html and "<b>bold</b>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "&lt;b&gt;bold&lt;/b&gt;" in html
    assert "x&amp;y" in html


def test_same_inputs_same_bytes_and_quiet_prints_nothing(made, trip_log_plan, tmp_path):
    again = tmp_path / "again.html"
    with threadpool_limits(limits=1):
        result = ok(invoke("report", trip_log_plan.parent / "trips.csv", "--plan",
                           trip_log_plan, "--out", again, "--jobs", "1", "--quiet"))
    assert result.stdout == "" and result.stderr == ""
    assert again.read_bytes() == made[0].read_bytes()


def test_a_bad_plan_is_one_line_exit_2_and_no_file(trip_log_plan, tmp_path):
    bad = tmp_path / "plan.json"
    bad.write_text("{not json", encoding="utf-8")
    out = tmp_path / "report.html"
    result = invoke("report", trip_log_plan.parent / "trips.csv", "--plan", bad, "--out", out)
    assert result.exit_code == 2
    (line,) = result.stderr.splitlines()
    assert line.startswith("imputelab: error: --plan") and "not valid JSON" in line
    assert result.stdout == ""
    assert list(tmp_path.iterdir()) == [bad]


def test_a_plan_of_another_file_is_refused_without_force(trip_log_plan, tmp_path):
    other = write_trip_log(tmp_path / "other.csv", n_trips=120)
    out = tmp_path / "report.html"
    result = invoke("report", other, "--plan", trip_log_plan, "--out", out)
    assert result.exit_code == 2
    (line,) = result.stderr.splitlines()
    assert "different content" in line and "--force" in line
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["other.csv"]


def test_report_refuses_to_write_over_its_input(trip_log_plan, tmp_path):
    result = invoke("report", trip_log_plan.parent / "trips.csv", "--plan", trip_log_plan,
                    "--out", trip_log_plan)
    assert result.exit_code == 2
    assert "--out" in result.stderr and "input" in result.stderr


def test_survey_options_come_from_the_plan_and_the_command_line_wins(trip_log_plan):
    data = load(trip_log_plan)
    rating = data["columns"]["driver_rating"]
    rating["cleaning"]["missing_codes"] = [99]
    rating["cleaning"]["kind_source"] = "user"
    data["columns"]["depot"]["kind"] = "text"  # an edit of the plan
    plan = Plan.from_dict(data)
    options = survey_options_for(plan, SurveyOptions(missing_codes={"fuel_l": [0]}))
    assert options.missing_codes == {"driver_rating": [99], "fuel_l": [0]}
    assert options.kinds == {"driver_rating": "numeric", "depot": "text"}
    assert set(options.date_formats) == {"departed_at", "arrived_at"}
    assert options.drop_threshold == data["settings"]["drop_threshold"]
    assert options.seed == data["settings"]["seed"]
    given = SurveyOptions(kinds={"depot": "categorical"})
    assert survey_options_for(plan, given, drop_threshold=0.9).kinds["depot"] == "categorical"
    assert survey_options_for(plan, given, drop_threshold=0.9).drop_threshold == 0.9


def test_the_survey_read_as_the_plan_finds_the_plans_evidence(trip_log_plan):
    plan = Plan.load(trip_log_plan)
    table = read_table(trip_log_plan.parent / "trips.csv")
    with threadpool_limits(limits=1):
        survey = survey_table(table, survey_options_for(plan))
    for name, col in plan.columns.items():
        found = survey.columns[name]
        assert found.spec.kind == col.kind, name
        assert found.drop == (col.action == "drop"), name
        check, planned = found.evidence.get("missingness"), col.evidence.get("missingness")
        assert (check or {}).get("verdict") == (planned or {}).get("verdict"), name
        assert [r["when"] for r in found.evidence.get("structural", [])] == [
            r["when"] for r in col.evidence.get("structural", [])], name


def test_a_plan_with_stored_checks_is_reported_without_a_new_survey(trip_log_plan,
                                                                      monkeypatch):
    import imputelab.report.facts as facts_module

    plan = Plan.load(trip_log_plan)
    assert plan.survey is not None and plan.survey["checks"] is True
    assert set(plan.survey) == {"checks", "mcar_test", "co_missing"}
    table = read_table(trip_log_plan.parent / "trips.csv")
    older = Plan.from_dict({k: v for k, v in plan.to_dict().items() if k != "survey"})
    assert older.survey is None and "survey" not in older.to_dict()  # older plans still load
    with threadpool_limits(limits=1):
        surveyed = build_report(table, older, survey_options=survey_options_for(older))

        def no_survey(*args, **kwargs):
            raise AssertionError("the report surveyed the file again")

        monkeypatch.setattr(facts_module, "survey_table", no_survey)
        stored = build_report(table, plan, survey_options=survey_options_for(plan))
    # The stored checks give the page a fresh survey of the same file gives: the same text
    # and numbers; chart coordinates may move in the sixth digit (the plan keeps six).
    def text(page: str) -> str:
        return re.sub(r"<svg.*?</svg>", "<svg/>", page, flags=re.S)

    assert text(stored) == text(surveyed)
    assert stored.count("<svg") == surveyed.count("<svg")
    assert f"p = {plan.survey['mcar_test']['p_value']:.3g}" in section(stored, "diagnostics")
    with pytest.raises(AssertionError, match="surveyed the file again"):
        build_report(table, plan, survey_options=SurveyOptions(kinds={"depot": "text"}))


def test_expected_error_is_shown_beside_the_selection_scores_when_the_plan_has_it(
        trip_log_plan):
    import imputelab.report.charts as charts
    from imputelab.fill.frame import FillReport
    from imputelab.report.experiment import section_experiment
    from imputelab.report.facts import Facts

    def experiment(plan: Plan) -> str:
        facts = Facts(table=None, plan=plan, survey=None, typed=pd.DataFrame(),
                      filled=pd.DataFrame(), fill=FillReport(), charts=charts)
        with threadpool_limits(limits=1):
            return section_experiment(facts)

    plan = Plan.load(trip_log_plan)
    scored = [n for n, c in plan.columns.items() if c.scores and c.action == "impute"]
    for col in plan.columns.values():
        col.expected_error = None  # as in plans made before expected_error
    without = experiment(plan)  # nothing shown, no error
    assert "expected error (held-out cells)" not in without
    assert without.count("Selection scores: ") == len(scored)
    name = scored[0]
    plan.columns[name].expected_error = {"metric": "nrmse", "score": 0.5123, "se": 0.021,
                                         "draws": 6}
    shown = experiment(plan)
    article = shown[shown.index(f"<code>{name}</code>"):]
    article = article[:article.index("</article>")]
    assert article.count("expected error (held-out cells)") == 1
    assert "nrmse 0.5123 &plusmn; 0.021 (SE), over 6 draw(s)" in article
    assert shown.count("expected error (held-out cells)") == 1  # only the column with one
