"""Tests for score.plan: the one-standard-error choice and the plan's JSON form."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from imputelab.errors import PlanError
from imputelab.methods import METHODS
from imputelab.score.choice import table_choice as _table_choice
from imputelab.score.plan import PLAN_FORMAT, PLAN_VERSION, ColumnPlan, Plan, choose_method

# The registry's own ranks: mean/median/mode 1 < knn 2 < chained-linear 3 < forest 4 < boosted 5.
SIMPLICITY = {name: cls.simplicity for name, cls in METHODS.items()}

# ------------------------------------------------------------------- the one-SE rule
# The rule: among methods whose mean is within one standard error of the best mean, take the
# simplest (Breiman, Friedman, Olshen & Stone 1984, Classification and Regression Trees,
# section 3.4.3; Hastie, Tibshirani & Friedman 2009, The Elements of Statistical Learning,
# 2nd ed., section 7.10; both from memory). Every case below is worked by hand from that rule.


def choose(summary, *, greater_is_better=False, metric="nrmse", order=()):
    return choose_method(summary, SIMPLICITY, metric=metric,
                         greater_is_better=greater_is_better, order=order)


def test_best_wins_when_nothing_simpler_is_within_one_se():
    # best 0.60 ± 0.01 -> bound 0.61; mean 0.95 and knn 0.70 are outside it
    summary = {"mean": (0.95, 0.02), "knn": (0.70, 0.02), "chained-linear": (0.60, 0.01)}
    method, reason = choose(summary)
    assert method == "chained-linear"
    assert reason.startswith("chained-linear had the best mean nrmse (0.6 ± 0.01 SE)")
    assert "next was knn (0.7)" in reason


def test_a_simpler_method_within_one_se_wins():
    # best 0.60 ± 0.05 -> bound 0.65; knn at 0.64 is inside and simpler
    summary = {"mean": (0.95, 0.02), "knn": (0.64, 0.02), "chained-linear": (0.60, 0.05)}
    method, reason = choose(summary)
    assert method == "knn"
    assert "knn (0.64) is within one standard error and simpler, so it is chosen" in reason


def test_the_bound_is_inclusive():
    # exactly one SE away counts as within (bound = 0.5 + 0.25 = 0.75, exact in binary)
    method, _ = choose({"mean": (0.75, 0.0), "chained-forest": (0.5, 0.25)})
    assert method == "mean"


def test_the_se_of_the_best_sets_the_bound_not_the_challengers():
    # the simpler method's own large SE does not pull it inside: bound is 0.60 + 0.01
    method, _ = choose({"mean": (0.70, 0.50), "chained-linear": (0.60, 0.01)})
    assert method == "chained-linear"


def test_a_more_complex_method_within_one_se_does_not_displace_a_simpler_best():
    method, _ = choose({"knn": (0.60, 0.05), "chained-boosted": (0.62, 0.01)})
    assert method == "knn"


def test_ties_in_simplicity_are_broken_by_score():
    # mean, median and mode share rank 1 and are all within one SE of the best
    summary = {"mean": (0.66, 0.01), "median": (0.63, 0.01), "mode": (0.65, 0.01),
               "chained-boosted": (0.60, 0.05)}
    method, _ = choose(summary)
    assert method == "median"


def test_equal_scores_and_simplicity_fall_back_to_the_given_order():
    summary = {"median": (0.70, 0.0), "mean": (0.70, 0.0)}
    assert choose(summary, order=["mean", "median"])[0] == "mean"
    assert choose(summary, order=["median", "mean"])[0] == "median"


def test_greater_is_better_metrics_look_for_the_highest_mean():
    # accuracy: best 0.90 ± 0.02 -> bound 0.88; knn 0.89 inside, mode 0.60 outside
    summary = {"mode": (0.60, 0.01), "knn": (0.89, 0.01), "chained-linear": (0.90, 0.02)}
    assert choose(summary, greater_is_better=True, metric="accuracy")[0] == "knn"
    # with a tight SE the best itself stays
    summary["chained-linear"] = (0.90, 0.005)
    method, reason = choose(summary, greater_is_better=True, metric="accuracy")
    assert method == "chained-linear"
    assert "best mean accuracy (0.9" in reason


def test_greater_is_better_does_not_pick_the_lowest():
    summary = {"mode": (0.30, 0.0), "chained-linear": (0.90, 0.0)}
    assert choose(summary, greater_is_better=True, metric="accuracy")[0] == "chained-linear"
    assert choose(summary, greater_is_better=False, metric="pfc")[0] == "mode"


def test_nan_and_missing_means_are_ignored():
    summary = {"mean": (math.nan, 0.0), "median": (None, 0.0), "knn": (0.8, 0.01),
               "chained-linear": (0.7, 0.01)}
    assert choose(summary)[0] == "chained-linear"


def test_a_nan_se_counts_as_zero():
    # one draw has no standard error; the rule degenerates to "the best"
    method, _ = choose({"mean": (0.61, 0.0), "chained-linear": (0.60, math.nan)})
    assert method == "chained-linear"


def test_an_infinite_mean_is_ignored():
    assert choose({"mean": (math.inf, 0.0), "knn": (0.9, 0.0)})[0] == "knn"


def test_a_single_method_is_chosen_with_no_runner_up():
    method, reason = choose({"median": (0.9, 0.1)})
    assert method == "median"
    assert "next was" not in reason


@pytest.mark.parametrize("summary", [{"mean": (math.nan, 0.1), "knn": (None, 0.1)}, {}],
                         ids=["all-nan", "empty"])
def test_no_finite_score_raises(summary):
    with pytest.raises(PlanError, match="no method produced a finite pfc"):
        choose(summary, metric="pfc")


# ------------------------------------------------------------------------------ JSON form


def make_plan() -> Plan:
    """A plan as score writes one: every action, scores, skipped methods and cleaning."""
    return Plan(
        source={"file": "trips.csv", "format": "csv", "rows": 500,
                "columns": ["trip_id", "payload_kg", "depot", "remark"],
                "fingerprint": "sha256:" + "ab" * 32, "delimiter": ",", "decimal": "."},
        settings={"masks": ["mcar", "mar"], "rate": 0.2, "repeats": 3, "seed": 7,
                  "methods": ["mean", "knn"], "metrics": {"numeric": "nrmse"},
                  "target": None, "use_target": False},
        columns={
            "trip_id": ColumnPlan(kind="identifier", missing_fraction=0.0, action="exclude",
                                  reason="identifier column: passed through unchanged"),
            "payload_kg": ColumnPlan(
                kind="numeric", missing_fraction=0.048, action="impute", method="knn",
                params={"n_neighbors": 5, "max_donors": 3000},
                reason="knn had the best mean nrmse",
                scores={"knn": {"nrmse": 0.712345, "nrmse_se": 0.0123, "seconds": 0.25},
                        "mean": {"nrmse": 1.00002, "nrmse_se": 0.004, "seconds": 0.001}},
                cleaning={"kind": "numeric", "integer": False, "decimals": 1,
                          "tokens": {"not weighed": 31, "n/a": 4}, "missing_codes": []}),
            "depot": ColumnPlan(kind="categorical", missing_fraction=0.01, action="impute",
                                method="mode", skipped={"mean": "mean does not fill categorical "
                                                                "columns"}),
            "remark": ColumnPlan(kind="text", missing_fraction=0.51, action="drop",
                                 reason="51.0% missing, above the drop threshold 0.5"),
        },
    )


def test_to_json_then_from_dict_gives_back_the_same_plan():
    plan = make_plan()
    back = Plan.from_dict(json.loads(plan.to_json()))
    assert back == plan
    assert back.to_json() == plan.to_json()


def test_load_reads_what_save_wrote(tmp_path):
    plan = make_plan()
    path = plan.save(tmp_path / "plan.json")
    assert path == tmp_path / "plan.json"
    assert Plan.load(path) == plan


def test_the_json_layout_is_the_documented_one():
    data = json.loads(make_plan().to_json())
    assert list(data) == ["format", "version", "source", "settings", "downstream", "columns"]
    assert data["format"] == PLAN_FORMAT == "imputelab-plan"
    assert data["version"] == PLAN_VERSION == 3
    assert list(data["columns"]["payload_kg"]) == [
        "kind", "missing_fraction", "action", "method", "params", "reason", "scores",
        "skipped", "cleaning", "indicator", "evidence", "expected_error", "structural",
    ]


def test_same_plan_twice_gives_the_same_bytes(tmp_path):
    first = make_plan().save(tmp_path / "a.json").read_bytes()
    second = make_plan().save(tmp_path / "b.json").read_bytes()
    assert first == second
    assert first.endswith(b"}\n")
    assert first.decode("utf-8") == make_plan().to_json()


def test_non_ascii_names_are_written_as_text():
    plan = make_plan()
    plan.source["file"] = "fahrten_kühl.csv"
    assert '"fahrten_kühl.csv"' in plan.to_json()


@pytest.mark.parametrize(
    ("value", "written"),
    [
        (0.1234567891, 0.123457),
        (123456789.0, 123457000.0),
        (1.0000004, 1.0),
        (-2.71828182846, -2.71828),
        (1e-9 / 3, 3.33333e-10),
        (0.5, 0.5),
    ],
)
def test_floats_are_rounded_to_six_significant_digits(value, written):
    plan = make_plan()
    plan.columns["payload_kg"].scores["knn"]["nrmse"] = value
    plan.columns["payload_kg"].missing_fraction = value
    plan.settings["rate"] = value
    data = json.loads(plan.to_json())
    assert data["columns"]["payload_kg"]["scores"]["knn"]["nrmse"] == written
    assert data["columns"]["payload_kg"]["missing_fraction"] == written
    assert data["settings"]["rate"] == written


def test_rounding_reaches_floats_inside_lists_and_keeps_ints_and_bools():
    plan = make_plan()
    plan.settings["grid"] = [0.1234567891, (2.0000001, 3), True, 7]
    data = json.loads(plan.to_json())
    assert data["settings"]["grid"] == [0.123457, [2.0, 3], True, 7]
    assert data["settings"]["repeats"] == 3
    assert isinstance(data["settings"]["repeats"], int)


def test_nan_and_infinite_floats_are_written_as_null():
    # Strict JSON (RFC 8259, section 6) has no NaN or Infinity.
    plan = make_plan()
    plan.columns["payload_kg"].scores["mean"]["nrmse_se"] = math.nan
    plan.columns["payload_kg"].scores["knn"]["seconds"] = math.inf
    text = plan.to_json()
    assert "NaN" not in text and "Infinity" not in text
    data = json.loads(text)
    assert data["columns"]["payload_kg"]["scores"]["mean"]["nrmse_se"] is None
    assert data["columns"]["payload_kg"]["scores"]["knn"]["seconds"] is None


def test_to_dict_does_not_change_the_plan():
    plan = make_plan()
    plan.columns["payload_kg"].scores["knn"]["nrmse"] = 0.1234567891
    plan.to_dict()
    assert plan.columns["payload_kg"].scores["knn"]["nrmse"] == 0.1234567891


# --------------------------------------------------------------------------- validation


def plan_data() -> dict:
    return json.loads(make_plan().to_json())


@pytest.mark.parametrize("version", [4, 0, "1", None])
def test_an_unknown_version_is_refused_and_named(version):
    data = plan_data()
    data["version"] = version
    with pytest.raises(PlanError, match=re.escape(f"is plan version {version!r}; this "
                                                  "imputelab reads versions 1, 2 and 3:")):
        Plan.from_dict(data)


def test_a_missing_version_is_refused():
    data = plan_data()
    del data["version"]
    with pytest.raises(PlanError, match="is plan version None"):
        Plan.from_dict(data)


@pytest.mark.parametrize("data", [{"format": "other-plan", "version": 1}, {"version": 1},
                                  [1, 2, 3], "imputelab-plan"],
                         ids=["other-format", "no-format", "list", "string"])
def test_a_wrong_format_is_refused(data):
    with pytest.raises(PlanError, match='is not an imputelab plan .no "format": '
                                        '"imputelab-plan".'):
        Plan.from_dict(data)


def test_the_origin_names_the_file_in_messages():
    with pytest.raises(PlanError, match=r"^--plan 'p\.json' is not an imputelab plan"):
        Plan.from_dict({}, origin="--plan 'p.json'")


def test_an_invalid_action_is_refused():
    data = plan_data()
    data["columns"]["depot"]["action"] = "guess"
    with pytest.raises(PlanError, match="column 'depot' has action 'guess'; use one of: "
                                        "impute, drop, exclude"):
        Plan.from_dict(data)


def test_an_unknown_kind_is_refused():
    data = plan_data()
    data["columns"]["depot"]["kind"] = "colour"
    with pytest.raises(PlanError, match="column 'depot' has unknown kind 'colour'"):
        Plan.from_dict(data)


@pytest.mark.parametrize("method", [None, ""])
def test_impute_without_a_method_is_refused(method):
    data = plan_data()
    data["columns"]["depot"]["method"] = method
    with pytest.raises(PlanError, match="column 'depot' is to be imputed but has no method"):
        Plan.from_dict(data)


def test_drop_and_exclude_need_no_method():
    data = plan_data()
    assert data["columns"]["remark"]["method"] is None
    assert Plan.from_dict(data).columns["remark"].action == "drop"


def test_unknown_or_missing_column_keys_are_refused():
    data = plan_data()
    data["columns"]["depot"]["colour"] = "red"
    with pytest.raises(PlanError, match="column 'depot' is malformed: .*colour"):
        Plan.from_dict(data)
    data = plan_data()
    del data["columns"]["depot"]["action"]
    with pytest.raises(PlanError, match="column 'depot' is malformed: .*action"):
        Plan.from_dict(data)


@pytest.mark.parametrize(("key", "value"), [("columns", ["depot"]), ("source", [1, 2]),
                                            ("settings", "seed=7")],
                         ids=["columns-list", "source-list", "settings-string"])
def test_sections_that_are_not_objects_are_refused(key, value):
    # A hand-edited plan must fail as a PlanError (a message), never as a traceback.
    data = plan_data()
    data[key] = value
    with pytest.raises(PlanError, match=f'"{key}" must be a JSON object'):
        Plan.from_dict(data)


@pytest.mark.parametrize("value", [["impute"], "impute", 3])
def test_a_column_that_is_not_an_object_is_refused(value):
    data = plan_data()
    data["columns"]["depot"] = value
    with pytest.raises(PlanError, match="column 'depot' must be a JSON object"):
        Plan.from_dict(data)


def test_load_refuses_a_missing_file_and_bad_json(tmp_path):
    with pytest.raises(PlanError, match=r"`plan` '.*nope\.json': no such file"):
        Plan.load(tmp_path / "nope.json")
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": "imputelab-plan",', encoding="utf-8")
    with pytest.raises(PlanError, match=r"`plan` '.*bad\.json' is not valid JSON"):
        Plan.load(bad)


# ------------------------------------------------------------------------------ atomicity


def listing(folder: Path) -> list[str]:
    # iterdir rather than glob: the temporary file's name starts with a dot.
    return sorted(p.name for p in folder.iterdir())


def test_save_leaves_no_part_file(tmp_path):
    make_plan().save(tmp_path / "plan.json")
    assert listing(tmp_path) == ["plan.json"]


def test_save_replaces_an_existing_file(tmp_path):
    target = tmp_path / "plan.json"
    target.write_text("old", encoding="utf-8")
    make_plan().save(target)
    assert Plan.load(target) == make_plan()
    assert listing(tmp_path) == ["plan.json"]


def test_a_failed_save_leaves_the_existing_file_untouched(tmp_path, monkeypatch):
    target = tmp_path / "plan.json"
    target.write_text("the previous plan", encoding="utf-8")
    real_write_text = Path.write_text

    def half_then_fail(self, text, *args, **kwargs):
        # a disk that fills up halfway through the write
        real_write_text(self, text[: len(text) // 2], *args, **kwargs)
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(Path, "write_text", half_then_fail)
    with pytest.raises(OSError, match="No space left on device"):
        make_plan().save(target)
    monkeypatch.undo()
    assert target.read_text(encoding="utf-8") == "the previous plan"
    assert listing(tmp_path) == ["plan.json"]


def test_a_failed_first_save_leaves_nothing(tmp_path, monkeypatch):
    def fail(self):
        raise RuntimeError("cannot serialise")

    monkeypatch.setattr(Plan, "to_json", fail)
    with pytest.raises(RuntimeError, match="cannot serialise"):
        make_plan().save(tmp_path / "plan.json")
    assert listing(tmp_path) == []


@pytest.mark.parametrize(("version", "absent"), [
    (1, ("indicator", "evidence", "expected_error", "structural")),
    (2, ("expected_error", "structural")),
])
def test_older_plans_still_load_without_the_newer_fields(version, absent):
    data = plan_data()
    data["version"] = version
    for col in data["columns"].values():
        for key in absent:
            del col[key]
    plan = Plan.from_dict(data)
    defaults = {"indicator": False, "evidence": {}, "expected_error": None, "structural": None}
    for col in plan.columns.values():
        assert all(getattr(col, key) == defaults[key] for key in absent)
    assert plan.columns["payload_kg"].method == "knn"


def test_expected_error_and_structural_rule_round_trip():
    plan = make_plan()
    col = plan.columns["payload_kg"]
    col.expected_error = {"metric": "nrmse", "score": 0.7234567, "se": None, "draws": 3}
    col.structural = {"when": "depot == 'Hull'", "other": "depot", "op": "==",
                      "values": ["Hull"], "value": -1.0}
    back = Plan.from_dict(json.loads(plan.to_json()))
    assert back.columns["payload_kg"].expected_error == {"metric": "nrmse", "score": 0.723457,
                                                         "se": None, "draws": 3}
    assert back.columns["payload_kg"].structural == col.structural


@pytest.mark.parametrize(("rule", "message"), [
    ("x", "must be a JSON object or null"),
    ({"other": "depot", "op": "==", "values": ["Hull"]}, "lacks value"),
    ({"other": "depot", "op": "<", "values": [1], "value": 0}, "op\" must be one of"),
    ({"other": "depot", "op": "in", "values": [], "value": 0}, "values\" must be a list"),
])
def test_a_malformed_structural_rule_is_refused(rule, message):
    data = plan_data()
    data["columns"]["payload_kg"]["structural"] = rule
    with pytest.raises(PlanError, match=f"column 'payload_kg': .*{message}"):
        Plan.from_dict(data)


@pytest.mark.parametrize("value", ["yes", 1, None])
def test_indicator_must_be_a_json_boolean(value):
    data = plan_data()
    name = next(iter(data["columns"]))
    data["columns"][name]["indicator"] = value
    with pytest.raises(PlanError, match=f"column '{name}': \"indicator\" must be true or false"):
        Plan.from_dict(data)


def test_ranking_metric_is_the_primary_metric_or_the_choose_by_score():
    plan = Plan(source={}, settings={"metrics": {"numeric": "mae", "categorical": "pfc"}},
                columns={})
    assert plan.ranking_metric("numeric") == "mae"
    assert plan.ranking_metric("datetime") == "mae"  # dates are scored as numbers
    assert plan.ranking_metric("binary") == "pfc"
    assert Plan(source={}, settings={}, columns={}).ranking_metric("numeric") == "nrmse"
    ranked = Plan(source={}, settings={"choose_by": "distribution"}, columns={})
    assert ranked.ranking_metric("categorical") == "distribution"


# ------------------------------------------------------------------- the table's leader


def _draw_rows(per_method: dict[str, list[float]]) -> pd.DataFrame:
    return pd.DataFrame([{"mask": "mcar", "repeat": r, "method": m, "nrmse": v}
                         for m, values in per_method.items() for r, v in enumerate(values)])


def test_a_small_lead_is_written_in_significant_digits_not_rounded_to_zero():
    leader = [0.500020, 0.500030, 0.500040]
    other = [0.500010, 0.500034, 0.500022]  # ahead by 8e-06 on average
    rows = _draw_rows({"blend": leader, "knn": other})
    usable = {m: (float(np.mean(v)), 0.0) for m, v in
              {"blend": leader, "knn": other}.items()}
    chosen, why = _table_choice(rows, "nrmse", usable, False, "blend")
    # paired SE of the per-draw differences, std(ddof=1) / sqrt(n) (the usual standard
    # error of a mean), computed with numpy
    diff = np.array(leader) - np.array(other)
    se = diff.std(ddof=1) / np.sqrt(len(diff))
    assert chosen == "blend"
    assert f"knn is ahead here by {np.mean(diff):.3g}, within two paired standard errors " \
           f"({se:.2g})" in why
    assert "by 8e-06" in why and "(0)" not in why


def test_a_tie_with_the_leader_is_not_a_lead():
    rows = _draw_rows({"blend": [0.4, 0.5], "knn": [0.4, 0.5]})
    chosen, why = _table_choice(rows, "nrmse", {"knn": (0.45, 0.05), "blend": (0.45, 0.05)},
                                False, "blend")
    assert chosen == "blend"
    assert why == "blend has the best mean nrmse over the table's columns and on this one (0.45)"
