"""Tests for fill.frame: what a fill may change, what it must keep, and the file it writes."""

from __future__ import annotations

import json
import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from threadpoolctl import threadpool_limits

from imputelab.errors import DataError, PlanError
from imputelab.fill.frame import (
    FillReport,
    check_plan,
    clean_with_plan,
    fill_frame,
    fill_table,
    fit_plan,
)
from imputelab.io.columns import ColumnSpec
from imputelab.io.tables import Table, read_table, write_table
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.plan import ColumnPlan, Plan
from imputelab.survey.table import SurveyOptions

CHEAP = ScoreOptions(masks=("mcar",), repeats=1, methods=["mean", "median", "mode",
                                                          "chained-linear"])
MINUTES = "%Y-%m-%d %H:%M"
CARGO = ["dairy", "fish", "fruit", "meat"]  # "fish" is a category no row holds
DEPOTS = ["Derby", "Hull", "Leeds", "York"]


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    # Tiny solves spread over BLAS threads are many times slower, not faster.
    with threadpool_limits(limits=1):
        yield


# ---------------------------------------------------------------------- hand-made plans

SPECS = {
    "temp_c": ColumnSpec(kind="numeric", decimals=2),
    "stops": ColumnSpec(kind="numeric", integer=True),
    "depot": ColumnSpec(kind="categorical"),
    "reefer": ColumnSpec(kind="binary"),
    "departed": ColumnSpec(kind="datetime", date_format=MINUTES),
    "cargo": ColumnSpec(kind="categorical"),
    "remark": ColumnSpec(kind="text"),
}
NUMBER_METHODS = ["median", "mode", "chained-linear", "chained-boosted", "knn"]
LABEL_METHODS = ["mode", "chained-linear", "chained-boosted", "knn"]
# Light settings: these tests are about what a fill keeps, not how good it is.
LIGHT = {"chained-boosted": {"max_trees": 20, "n_sweeps": 1}, "chained-linear": {"n_sweeps": 2}}


def hand_plan(methods: dict[str, str], actions: dict[str, str] | None = None,
              seed: int = 0) -> Plan:
    """A plan as a user could write it: one method (or action) per column."""
    actions = actions or {}
    columns = {}
    for name, spec in SPECS.items():
        action = actions.get(name, "exclude" if spec.kind == "text" else "impute")
        method = methods.get(name) if action == "impute" else None
        columns[name] = ColumnPlan(kind=spec.kind, missing_fraction=0.0, action=action,
                                   method=method, params=dict(LIGHT.get(method, {})),
                                   cleaning=spec.to_dict())
    return Plan(source={"file": "trips.csv"}, settings={"seed": seed}, columns=columns)


@st.composite
def trip_frames(draw) -> pd.DataFrame:
    """Random typed trip logs: one column of each cleaned dtype, random holes, and at least
    three observed cells in every column."""
    n = draw(st.integers(8, 30))

    def column(values):
        return draw(st.lists(values, min_size=n, max_size=n))

    def holes():
        mask = np.array(column(st.booleans()))
        mask[draw(st.permutations(range(n)))[:3]] = False
        return mask

    temps = column(st.floats(-30, 30, allow_nan=False, width=32))
    stops = column(st.integers(-5, 40))
    depots = column(st.sampled_from(DEPOTS))
    reefer = column(st.sampled_from(["yes", "no"]))
    minutes = column(st.integers(0, 60 * 24 * 365))
    unit = draw(st.sampled_from(["s", "ms", "us", "ns"]))
    cargo = column(st.sampled_from(["dairy", "fruit", "meat"]))
    remark = column(st.sampled_from(["", "late", "door seal worn"]))
    departed = pd.Timestamp("2026-01-01") + pd.to_timedelta(np.array(minutes), unit="min")
    frame = pd.DataFrame({
        "temp_c": np.asarray(temps, dtype=float),
        "stops": pd.array(stops, dtype="Int64"),
        "depot": pd.array(depots, dtype="str"),
        "reefer": pd.array(reefer, dtype="str"),
        "departed": pd.Series(departed).astype(f"datetime64[{unit}]"),
        "cargo": pd.Categorical(cargo, categories=CARGO),
        "remark": pd.array(remark, dtype="str"),
    })
    for name in ("temp_c", "stops", "depot", "reefer", "departed", "cargo"):
        frame[name] = frame[name].mask(holes())
    # Neither 0..n-1 nor sorted, so that positional and label indexing cannot be confused.
    frame.index = pd.Index(np.array(draw(st.permutations(range(n)))) + 1000, name="trip")
    return frame


def quiet_fill(typed: pd.DataFrame, plan: Plan, **kwargs) -> pd.DataFrame:
    # Tiny degenerate frames make the learners warn; the warnings are not under test.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fill_frame(typed, plan, **kwargs)


def assert_fill_invariants(typed: pd.DataFrame, out: pd.DataFrame, plan: Plan,
                           learned_from: pd.DataFrame | None = None) -> None:
    """What every fill keeps, whatever the method.

    Fills come from what the methods learned from (``learned_from``, by default the frame
    itself): labels seen there, numbers and timestamps inside the range seen there.
    """
    learned_from = typed if learned_from is None else learned_from
    kept = [n for n in typed.columns if plan.columns[n].action != "drop"]
    assert list(out.columns) == kept
    assert out.index.equals(typed.index)
    pd.testing.assert_series_equal(out.dtypes, typed.dtypes[kept])
    for name in kept:
        before, after, source = typed[name], out[name], learned_from[name]
        seen = before.notna().to_numpy()
        # observed cells never change: exact equality
        pd.testing.assert_series_equal(after[seen], before[seen], obj=name, check_exact=True)
        if plan.columns[name].action != "impute":
            pd.testing.assert_series_equal(after, before, obj=name, check_exact=True)
            continue
        assert after.notna().all(), f"hole left in {name}"
        new = after[~seen]
        if SPECS[name].kind in ("categorical", "binary"):
            assert set(new) <= set(source.dropna()), name
        else:
            assert new.between(source.min(), source.max()).all(), name
        if name == "cargo":
            assert list(after.cat.categories) == CARGO
        if name == "departed":
            assert (new.dt.second == 0).all() and (new.dt.microsecond == 0).all()


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow],
          derandomize=True)
@given(frame=trip_frames(), data=st.data())
def test_fill_keeps_observed_cells_dtypes_and_labels(frame, data):
    methods = {name: data.draw(st.sampled_from(
        NUMBER_METHODS if SPECS[name].kind in ("numeric", "datetime") else LABEL_METHODS),
        label=name) for name in SPECS if SPECS[name].kind != "text"}
    plan = hand_plan(methods, seed=data.draw(st.integers(0, 2**16), label="seed"))
    before = frame.copy()
    report = FillReport()
    out = quiet_fill(frame, plan, report=report)
    pd.testing.assert_frame_equal(frame, before, check_exact=True)  # the input is not modified
    assert_fill_invariants(frame, out, plan)
    expected = {n: int(frame[n].isna().sum()) for n in methods}
    assert report.filled == expected
    assert report.methods == methods
    assert report.excluded == ["remark"]


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow],
          derandomize=True)
@given(frame=trip_frames(), data=st.data())
def test_excluded_and_dropped_columns_are_left_alone(frame, data):
    imputable = [n for n in SPECS if SPECS[n].kind != "text"]
    excluded = data.draw(st.lists(st.sampled_from(imputable), max_size=2, unique=True))
    dropped = data.draw(st.lists(st.sampled_from([n for n in imputable if n not in excluded]),
                                 max_size=2, unique=True))
    actions = {**dict.fromkeys(excluded, "exclude"), **dict.fromkeys(dropped, "drop")}
    plan = hand_plan(dict.fromkeys(imputable, "mode"), actions)
    report = FillReport()
    out = quiet_fill(frame, plan, report=report)
    assert_fill_invariants(frame, out, plan)
    assert report.dropped == [n for n in SPECS if n in dropped]
    assert report.excluded == [n for n in SPECS if n in excluded or n == "remark"]
    for name in excluded:  # holes of an excluded column stay holes
        np.testing.assert_array_equal(out[name].isna().to_numpy(), frame[name].isna().to_numpy())


def fixed_frame(seed: int = 0, n: int = 40) -> pd.DataFrame:
    """A seeded typed trip log with about 20% holes, for the tests that are not properties."""
    rng = np.random.default_rng(seed)
    temp = rng.normal(4.0, 2.0, n)
    frame = pd.DataFrame({
        "temp_c": temp,
        "stops": pd.array(np.clip(np.round(temp), 0, None).astype(int), dtype="Int64"),
        "depot": pd.array(rng.choice(DEPOTS, n), dtype="str"),
        "reefer": pd.array(np.where(temp > 4, "yes", "no"), dtype="str"),
        "departed": pd.Series(pd.Timestamp("2026-01-01")
                              + pd.to_timedelta(rng.integers(0, 10**5, n), unit="min")),
        "cargo": pd.Categorical(rng.choice(["dairy", "fruit", "meat"], n), categories=CARGO),
        "remark": pd.array(rng.choice(["", "late"], n), dtype="str"),
    })
    for name in list(frame.columns)[:-1]:
        frame[name] = frame[name].mask(rng.random(n) < 0.2)
    return frame


@pytest.mark.parametrize("method", ["chained-forest", "knn", "chained-linear"])
def test_one_method_for_every_column(method):
    frame = fixed_frame()
    plan = hand_plan(dict.fromkeys(SPECS, method))
    assert_fill_invariants(frame, quiet_fill(frame, plan), plan)


def test_same_plan_same_frame_same_fill():
    frame = fixed_frame(3)
    plan = hand_plan(dict.fromkeys(SPECS, "chained-boosted"), seed=5)
    pd.testing.assert_frame_equal(quiet_fill(frame, plan), quiet_fill(frame, plan),
                                  check_exact=True)


def test_a_method_that_cannot_fill_a_kind_is_a_plan_error():
    plan = hand_plan({**dict.fromkeys(SPECS, "mode"), "depot": "median"})
    with pytest.raises(PlanError, match="column 'depot': median does not fill categorical "
                                        "columns; choose another method in the plan"):
        fill_frame(fixed_frame(), plan)


def test_an_unknown_method_is_a_plan_error():
    plan = hand_plan({**dict.fromkeys(SPECS, "mode"), "temp_c": "magic"})
    with pytest.raises(PlanError, match="column 'temp_c' names method 'magic'; choose from: "
                                        "constant, mean, median, mode"):
        fill_frame(fixed_frame(), plan)


def test_parameters_the_method_does_not_take_are_ignored_with_a_warning():
    # A user who changes only "method" in the plan leaves the old method's params behind.
    frame = fixed_frame()
    plan = hand_plan(dict.fromkeys(SPECS, "mode"))
    plan.columns["temp_c"].params = {"n_neighbors": 3}
    report = FillReport()
    out = quiet_fill(frame, plan, report=report)
    assert report.warnings == ["column(s) temp_c: mode has no parameter n_neighbors; ignored"]
    assert_fill_invariants(frame, out, plan)


@pytest.mark.parametrize(("method", "params"), [
    ("knn", {"n_neighbors": "five"}),
    ("knn", {"n_neighbors": 0}),
    ("chained-linear", {"n_sweeps": -1}),
    ("chained-forest", {"n_trees": 0}),
    ("chained-boosted", {"learning_rate": -1.0}),
])
def test_a_bad_parameter_value_is_a_plan_error(method, params):
    # The plan is meant to be edited by hand (see imputelab.score.plan); a bad value is the user's
    # to fix, so it must come back as a PlanError naming the column.
    plan = hand_plan(dict.fromkeys(SPECS, "mode"))
    plan.columns["temp_c"].method = method
    plan.columns["temp_c"].params = params
    with pytest.raises(PlanError, match="column 'temp_c'"):
        quiet_fill(fixed_frame(), plan)


def test_a_column_with_nothing_observed_cannot_be_imputed():
    frame = fixed_frame()
    frame["temp_c"] = np.nan
    with pytest.raises(DataError, match="column 'temp_c' has no observed value.*\"drop\""):
        fill_frame(frame, hand_plan(dict.fromkeys(SPECS, "mode")))


def test_the_seed_of_the_plan_reaches_the_methods():
    frame = fixed_frame(4, n=80)
    fills = [quiet_fill(frame, hand_plan(dict.fromkeys(SPECS, "chained-forest"), seed=s))
             for s in (1, 1, 2)]
    pd.testing.assert_frame_equal(fills[0], fills[1], check_exact=True)
    assert not fills[0]["temp_c"].equals(fills[2]["temp_c"])


def test_model_fills_beyond_the_observed_range_are_clipped_to_it():
    # temp_c = stops exactly, but temp_c is seen only for stops 0..19: a regression fill for
    # stops 20..39 would extrapolate to 20..39; the fill stops at the largest value seen.
    frame = fixed_frame(n=40)
    frame["stops"] = pd.array(np.arange(40), dtype="Int64")
    frame["temp_c"] = np.where(np.arange(40) < 20, np.arange(40, dtype=float), np.nan)
    plan = hand_plan({**dict.fromkeys(SPECS, "mode"), "temp_c": "chained-linear"})
    out = quiet_fill(frame, plan)
    assert (out["temp_c"].iloc[20:] == 19.0).all()
    assert_fill_invariants(frame, out, plan)


# ------------------------------------------------------------------------ fit on another


def test_fit_on_learns_from_the_reference_and_fills_the_other():
    reference, later = fixed_frame(0, n=60), fixed_frame(1, n=30)
    plan = hand_plan({**dict.fromkeys(SPECS, "mode"), "temp_c": "median",
                      "departed": "median"})
    out = quiet_fill(later, plan, fit_on=reference)
    assert_fill_invariants(later, out, plan, learned_from=reference)
    holes = later.isna()
    # Reference: numpy's median and pandas' value_counts on the reference frame only (the fill
    # is written with the column's 2 decimals, as every numeric fill is).
    median = np.round(np.median(reference["temp_c"].dropna()), 2)
    assert (out.loc[holes["temp_c"], "temp_c"] == median).all()
    modal = reference["depot"].value_counts().sort_index(kind="stable")
    top = modal[modal == modal.max()].index[0]  # ties: the smallest label, as SimpleImputer
    assert (out.loc[holes["depot"], "depot"] == top).all()
    # and not what the frame itself would give
    own = quiet_fill(later, plan)
    assert not own.loc[holes["temp_c"], "temp_c"].equals(out.loc[holes["temp_c"], "temp_c"])


def test_fit_on_with_a_model_fills_every_hole_of_the_other():
    reference, later = fixed_frame(0, n=60), fixed_frame(1, n=30)
    # a label the reference never had: kept where observed, never used as a fill
    depot = later["depot"].copy()
    depot.iloc[np.flatnonzero(depot.notna().to_numpy())[:2]] = "Bristol"
    later["depot"] = depot
    plan = hand_plan(dict.fromkeys(SPECS, "chained-linear"))
    out = quiet_fill(later, plan, fit_on=reference)
    assert_fill_invariants(later, out, plan, learned_from=reference)
    assert (out["depot"] == "Bristol").sum() == 2


# --------------------------------------------------------------------------- CSV files


def trip_csv(path: Path, *, seed: int = 1, n: int = 60, delimiter: str = ",",
             decimal: str = ".") -> Path:
    """A CSV trip log: decimals, whole numbers, labels, timestamps, tokens and blanks."""
    rng = np.random.default_rng(seed)
    temp = rng.normal(4.0, 2.0, n)
    load = 1000.0 + 150.0 * temp + rng.normal(0.0, 80.0, n)
    stops = rng.integers(0, 6, n)
    depot = rng.choice(["Hull", "Leeds"], n)
    departed = pd.Timestamp("2026-03-01") + pd.to_timedelta(rng.integers(0, 10**5, n),
                                                            unit="min")

    def text(values, fmt):
        return np.array([fmt(v) for v in values], dtype=object)

    def number(fmt):
        return lambda v: fmt.format(v).replace(".", decimal)

    cells = {
        "trip_id": text(range(n), lambda i: f"T{i:04d}"),
        "temp_c": text(temp, number("{:.2f}")),
        "load_kg": text(load, number("{:.1f}")),
        "stops": text(stops, str),
        "depot": depot.astype(object),
        "departed": text(departed, lambda v: v.strftime(MINUTES)),
    }
    for name in ("temp_c", "load_kg", "stops", "depot", "departed"):
        cells[name][rng.random(n) < 0.15] = ""
    cells["load_kg"][[3, 17]] = "n/a"
    pd.DataFrame(cells).to_csv(path, index=False, sep=delimiter)
    return path


@pytest.fixture(scope="module")
def scored_csv(tmp_path_factory):
    path = trip_csv(tmp_path_factory.mktemp("csv") / "trips.csv")
    table = read_table(path)
    plan, _, _ = score_table(table, CHEAP)
    return table, plan


def holes_of(table: Table, plan: Plan) -> pd.DataFrame:
    typed, _ = clean_with_plan(table, plan)
    return typed.isna()


def test_fill_table_keeps_the_text_of_every_observed_cell(scored_csv):
    table, plan = scored_csv
    out, report = fill_table(table, plan)
    holes = holes_of(table, plan)
    assert list(out.columns) == list(table.frame.columns)
    for name in out.columns:
        assert pd.api.types.is_string_dtype(out[name].dtype)
        seen = ~holes[name].to_numpy()
        assert out[name][seen].tolist() == table.frame[name][seen].tolist(), name
    assert report.excluded == ["trip_id"]
    assert sum(report.filled.values()) == int(holes.drop(columns="trip_id").sum().sum())
    assert report.filled["load_kg"] == int(holes["load_kg"].sum())


def test_filled_cells_are_written_like_the_column(scored_csv):
    table, plan = scored_csv
    out, _ = fill_table(table, plan)
    holes = holes_of(table, plan)
    patterns = {"temp_c": r"-?\d+\.\d{2}", "load_kg": r"-?\d+\.\d", "stops": r"\d+",
                "depot": r"Hull|Leeds", "departed": r"2026-\d\d-\d\d \d\d:\d\d"}
    for name, pattern in patterns.items():
        filled = out[name][holes[name].to_numpy()]
        assert len(filled), name
        for cell in filled:
            assert re.fullmatch(pattern, cell), (name, cell)
    # the disguised blanks were filled too
    assert re.fullmatch(r"-?\d+\.\d", out["load_kg"].iloc[3])


def test_decimal_comma_files_keep_their_commas(tmp_path):
    path = trip_csv(tmp_path / "trips.csv", delimiter=";", decimal=",")
    table = read_table(path)
    assert (table.delimiter, table.decimal) == (";", ",")
    plan, _, _ = score_table(table, CHEAP)
    out, _ = fill_table(table, plan)
    holes = holes_of(table, plan)
    for name, pattern in {"temp_c": r"-?\d+,\d{2}", "load_kg": r"-?\d+,\d"}.items():
        assert holes[name].any()
        for cell in out[name]:
            assert re.fullmatch(pattern, cell), (name, cell)
    written = write_table(out, tmp_path / "filled.csv", delimiter=table.delimiter)
    again = read_table(written)
    assert (again.delimiter, again.decimal) == (";", ",")
    seen = ~holes.to_numpy()
    assert (again.frame.to_numpy()[seen] == table.frame.to_numpy()[seen]).all()
    # the filled file has no hole left in an imputed column
    refilled, _ = clean_with_plan(again, plan)
    assert refilled.drop(columns="trip_id").notna().all().all()


def test_same_plan_and_file_give_the_same_bytes(tmp_path):
    path = trip_csv(tmp_path / "trips.csv", seed=4)
    table = read_table(path)
    plan, _, _ = score_table(table, ScoreOptions(masks=("mcar",), repeats=1,
                                                 methods=["median", "mode", "chained-boosted"]))
    plan = Plan.load(plan.save(tmp_path / "plan.json"))
    outputs = []
    for i in range(2):
        out, _ = fill_table(read_table(path), plan)
        outputs.append(write_table(out, tmp_path / f"out{i}.csv").read_bytes())
    assert outputs[0] == outputs[1]
    assert outputs[0] != path.read_bytes()


def test_parquet_style_output_is_typed(scored_csv):
    table, plan = scored_csv
    out, _ = fill_table(table, plan, text_output=False)
    assert out["stops"].dtype == pd.Int64Dtype()
    assert out["temp_c"].dtype == np.float64
    assert pd.api.types.is_datetime64_any_dtype(out["departed"].dtype)
    assert out.drop(columns="trip_id").notna().all().all()


def test_fill_table_with_fit_on_fills_a_later_file(tmp_path, scored_csv):
    reference, plan = scored_csv
    later = read_table(trip_csv(tmp_path / "later.csv", seed=9, n=25))
    with pytest.raises(PlanError, match="has different content"):
        fill_table(later, plan)
    out, report = fill_table(later, plan, fit_on=reference)
    holes = holes_of(later, plan)
    seen = ~holes.to_numpy()
    assert (out.to_numpy()[seen] == later.frame.to_numpy()[seen]).all()
    # A later file differs from the planned one by design of --fit-on: no content warning,
    # since the methods learn from the reference, which is the planned file.
    assert not any("different content" in w for w in report.warnings)
    assert sum(report.filled.values()) == int(holes.drop(columns="trip_id").sum().sum())


def test_parquet_with_zone_aware_timestamps_fills_on_the_right_instants(tmp_path):
    # Parquet keeps a timestamp's zone; filled stamps must land in it, observed ones unchanged.
    rng = np.random.default_rng(6)
    n = 60
    departed = (pd.Timestamp("2026-03-01 08:00", tz="Europe/Berlin")
                + pd.to_timedelta(np.sort(rng.integers(0, 10**5, n)), unit="min"))
    frame = pd.DataFrame({"departed": pd.Series(departed), "load_kg": rng.normal(900, 50, n)})
    frame["departed"] = frame["departed"].mask(rng.random(n) < 0.2)
    path = tmp_path / "trips.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path)
    table = read_table(path)
    plan, _, _ = score_table(table, CHEAP)
    plan.columns["departed"].method, plan.columns["departed"].params = "median", {}
    out, report = fill_table(table, plan)
    before = table.frame["departed"]
    assert out["departed"].dtype == before.dtype
    assert str(out["departed"].dt.tz) == "Europe/Berlin"
    seen = before.notna().to_numpy()
    pd.testing.assert_series_equal(out["departed"][seen], before[seen], check_exact=True)
    assert report.filled["departed"] == int((~seen).sum())
    filled = out["departed"][~seen]
    assert filled.between(before.min(), before.max()).all()
    # The median fill is one instant: the median of the observed UTC instants (numpy), to
    # the second (a Parquet timestamp has no text format to say otherwise).
    seconds = before[seen].map(pd.Timestamp.timestamp).to_numpy()
    expected = pd.Timestamp(np.median(seconds), unit="s", tz="UTC").round("s")
    assert (filled == expected).all()


def test_fit_on_must_have_the_planned_columns(tmp_path, scored_csv):
    reference, plan = scored_csv
    narrow = tmp_path / "narrow.csv"
    reference.frame.drop(columns=["stops"]).to_csv(narrow, index=False)
    with pytest.raises(DataError, match=r"`fit_on` '.*narrow\.csv' lacks columns stops"):
        fill_table(reference, plan, fit_on=read_table(narrow))


def test_forced_fill_passes_unplanned_columns_through_in_place(tmp_path, scored_csv):
    table, plan = scored_csv
    wider = table.frame.copy()
    wider.insert(2, "driver", ["Ann", "", "Bo"] * (len(wider) // 3))
    path = tmp_path / "wider.csv"
    wider.to_csv(path, index=False)
    wide = read_table(path)
    with pytest.raises(PlanError, match="not in the plan: driver"):
        fill_table(wide, plan)
    out, report = fill_table(wide, plan, force=True)
    assert list(out.columns) == list(wider.columns)
    assert out["driver"].tolist() == wider["driver"].tolist()
    assert any("not in the plan: driver" in w for w in report.warnings)
    same, _ = fill_table(table, plan)
    pd.testing.assert_frame_equal(out.drop(columns="driver"), same, check_exact=True)


def test_the_report_is_plain_json_data(scored_csv):
    table, plan = scored_csv
    _, report = fill_table(table, plan)
    data = json.loads(json.dumps(report.to_dict()))
    assert data["filled"] == report.filled
    assert set(data) == {"filled", "methods", "dropped", "excluded", "new_tokens", "warnings"}


# ------------------------------------------------------------------ cleaning by the plan


def rating_csv(path: Path, cells: list[str]) -> Path:
    rng = np.random.default_rng(0)
    rows = ["rating,payload_kg"]
    for i, cell in enumerate(cells):
        rows.append(f"{cell},{1000 + 10 * i + int(rng.integers(0, 9))}")
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_clean_with_plan_applies_recorded_codes_and_tokens_and_reports_new_ones(tmp_path):
    first = ["4", "5", "99", "3", "n/a", "2", "99", "4", "5", "1", "3", "4", "99", "2", "5"]
    table = read_table(rating_csv(tmp_path / "first.csv", first))
    options = ScoreOptions(masks=("mcar",), repeats=1, methods=["median", "mode"],
                           survey=SurveyOptions(missing_codes={"rating": ["99"]}))
    plan, _, _ = score_table(table, options)
    cleaning = plan.columns["rating"].cleaning
    assert cleaning["missing_codes"] == ["99"] and cleaning["tokens"] == {"n/a": 1}

    later = ["3", "99", "n/a", "not rated", "5", "?", "not rated", "4"]
    typed, new_tokens = clean_with_plan(read_table(rating_csv(tmp_path / "later.csv", later)),
                                        plan)
    assert typed["rating"].dtype == pd.Int64Dtype()
    assert typed["rating"].isna().tolist() == [False, True, True, True, False, True, True,
                                               False]
    # 99 is a recorded code and n/a a recorded token: only the others are news
    assert new_tokens == {"rating": {"not rated": 2, "?": 1}}


def test_fill_table_warns_about_new_tokens(tmp_path):
    table = read_table(rating_csv(tmp_path / "first.csv",
                                  ["4", "5", "3", "n/a", "2", "4", "5", "1", "3", "4", "2", "5"]))
    plan, _, _ = score_table(table, ScoreOptions(masks=("mcar",), repeats=1,
                                                 methods=["median", "mode"]))
    later = read_table(rating_csv(tmp_path / "later.csv", ["3", "not rated", "5", "4"]))
    out, report = fill_table(later, plan, force=True)
    assert report.new_tokens == {"rating": {"not rated": 1}}
    assert "column 'rating': new cells read as missing: 'not rated' (1)" in report.warnings
    assert out["rating"].tolist()[1] == "4"  # the median of the surveyed file


def test_check_plan_refuses_other_columns_unless_forced(tmp_path, scored_csv):
    _, plan = scored_csv
    other = read_table(rating_csv(tmp_path / "other.csv", ["1", "2", "3"]))
    with pytest.raises(PlanError, match="its columns do not match .*missing from the file: "
                                        "trip_id, temp_c"):
        check_plan(plan, other)
    warnings_ = check_plan(plan, other, force=True)
    assert any("not in the plan: rating, payload_kg" in w for w in warnings_)


def test_indicator_columns_follow_the_table_and_flag_exactly_the_holes(scored_csv):
    table, plan = scored_csv
    plan = Plan.from_dict(plan.to_dict())
    for name in ("temp_c", "depot"):
        plan.columns[name].indicator = True
    holes = holes_of(table, plan)
    for text_output in (True, False):
        out, _ = fill_table(table, plan, text_output=text_output)
        assert list(out.columns) == [*table.frame.columns, "temp_c__was_missing",
                                     "depot__was_missing"]
        for name in ("temp_c", "depot"):
            flag = out[f"{name}__was_missing"]
            expected = holes[name].astype(int).tolist()
            assert flag.astype(int).tolist() == expected
            assert 0 < sum(expected) < len(expected)
        if not text_output:
            assert out["temp_c__was_missing"].dtype == np.int8


def test_an_indicator_name_already_in_the_table_is_a_plan_error(scored_csv):
    table, plan = scored_csv
    plan = Plan.from_dict(plan.to_dict())
    plan.columns["stops"].indicator = True
    frame = table.frame.rename(columns={"load_kg": "stops__was_missing"})
    plan.columns["stops__was_missing"] = plan.columns.pop("load_kg")
    clash = Table(frame, table.path, table.format)
    with pytest.raises(PlanError, match="already has a column 'stops__was_missing'"):
        fill_table(clash, plan, force=True)


def test_a_fitted_plan_applied_to_its_own_table_equals_the_in_memory_fill(scored_csv):
    # fit_plan + apply is what saved models and chunked fills use; on the training table it
    # must give exactly what fill_frame gives (the methods' fit_transform == fit + transform).
    table, plan = scored_csv
    typed, _ = clean_with_plan(table, plan)
    direct = fill_frame(typed, plan)
    fitted = fit_plan(typed, plan)
    pd.testing.assert_frame_equal(fitted.apply(typed), direct)
    # and on a slice of rows, row for row
    part = typed.iloc[10:30]
    pd.testing.assert_frame_equal(fitted.apply(part), direct.iloc[10:30])
