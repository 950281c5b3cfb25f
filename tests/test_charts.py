"""The report's charts, checked without golden images: the Figure objects themselves.

Each builder must give a title, labelled axes, the expected number of bars or series, and
marks that do not depend on colour alone (hatches, labels, markers). The SVG text must be the
same for the same figure, carry its text alternative, and hold nothing that points outside.
"""

from __future__ import annotations

import re

import matplotlib
import numpy as np
import pytest
from matplotlib.container import BarContainer, ErrorbarContainer

from imputelab.report import charts


def labelled(fig) -> matplotlib.axes.Axes:
    """The single axes of a figure, after checking its title and axis labels."""
    (ax,) = fig.axes
    assert (ax.get_title() + ax.get_title(loc="left")).strip()  # titles sit on the left
    assert ax.get_xlabel().strip()
    assert ax.get_ylabel().strip()
    return ax


def legend_texts(fig) -> list[str]:
    (legend,) = fig.legends
    return [t.get_text() for t in legend.get_texts()]


def test_pattern_order_groups_equal_rows_commonest_first():
    blank = np.array([[1, 0, 0], [0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 0], [1, 0, 0]], bool)
    order = charts.pattern_order(blank)
    # Worked by hand: pattern (a) x3 first, then the complete row x2, then (b) x1; rows keep
    # their table order inside a group.
    assert order.tolist() == [0, 2, 5, 1, 4, 3]


def test_missing_map_draws_one_box_per_run_of_blanks_and_says_when_sampled():
    blank = np.array([[1, 0, 0], [0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 0], [1, 0, 0]], bool)
    fig = charts.missing_map(blank, ["a", "b", "c"], total_rows=600)
    ax = labelled(fig)
    (boxes,) = ax.collections
    # After grouping: column a is blank in rows 0-2 (one run), b in row 5, c never.
    assert len(boxes.get_paths()) == 2
    assert [t.get_text() for t in ax.get_xticklabels()] == ["a", "b", "c"]
    assert "6 of 600" in ax.get_ylabel() and "sample" in ax.get_ylabel()
    assert legend_texts(fig) == ["blank", "has a value"]
    whole = charts.missing_map(blank, ["a", "b", "c"])
    assert "sample" not in whole.axes[0].get_ylabel()


def test_missing_bars_one_bar_per_column_and_the_threshold_line():
    fractions = {"a": 0.0, "b": 0.12, "c": 0.71, "d": 0.3}
    fig = charts.missing_bars(fractions, 0.5, drop={"c"})
    ax = labelled(fig)
    assert len(ax.patches) == 4
    (line,) = ax.get_lines()
    assert line.get_xdata()[0] == pytest.approx(0.5)
    hatches = [p.get_hatch() for p in ax.patches]
    assert hatches[2] and not any(hatches[:2] + hatches[3:])  # the column to drop, hatched
    texts = [t.get_text() for t in ax.texts]
    assert "71%  drop" in texts  # said in words too, not by colour alone
    assert legend_texts(fig) == ["drop threshold (50%)", "kept", "to drop"]


def test_method_scores_marks_the_chosen_method_and_draws_error_bars_and_masks():
    means = {"mean": 0.9, "median": 0.92, "knn": 0.61, "chained-forest": 0.58}
    errors = {"mean": 0.01, "median": 0.01, "knn": 0.02, "chained-forest": 0.04}
    by_mask = {m: {"mcar": v - 0.01, "mar": v + 0.01} for m, v in means.items()}
    fig = charts.method_scores(means, errors, column="fuel_l", metric="nrmse",
                               chosen="knn", by_mask=by_mask)
    ax = labelled(fig)
    assert "lower is better" in ax.get_xlabel()
    assert len(ax.patches) == 4
    assert [p.get_hatch() for p in ax.patches] == [None, None, "xx", None]
    assert sum(isinstance(c, BarContainer) for c in ax.containers) == 1
    assert sum(isinstance(c, ErrorbarContainer) for c in ax.containers) == 1
    masks = [line for line in ax.get_lines() if line.get_label().startswith("mean under")]
    assert sorted(line.get_label() for line in masks) == ["mean under mar", "mean under mcar"]
    # The one-SE bound of the best mean (chained-forest: 0.58 + 0.04), drawn as a line.
    bound = [line for line in ax.get_lines() if line.get_label().startswith("best")]
    assert bound[0].get_xdata()[0] == pytest.approx(0.62)
    assert "0.61  chosen" in [t.get_text() for t in ax.texts]
    assert "chosen" in legend_texts(fig)


def test_method_scores_leaves_out_the_one_se_bound_for_paired_rules():
    # The table and paired rules judge by paired differences: a bound drawn from the unpaired
    # standard error would suggest a rule the plan did not use.
    fig = charts.method_scores({"mean": 0.9, "knn": 0.6}, {"mean": 0.01, "knn": 0.02},
                               column="fuel_l", metric="nrmse", chosen="mean", bound=False)
    ax = labelled(fig)
    assert sum(isinstance(c, ErrorbarContainer) for c in ax.containers) == 1
    assert not [line for line in ax.get_lines() if line.get_label().startswith("best")]
    assert not [t for t in legend_texts(fig) if t.startswith("best")]


def test_method_scores_without_spread_or_winner_draws_bars_only():
    fig = charts.method_scores({"mean": 0.5, "mode": 0.6}, {"mean": 0.0, "mode": None},
                               column="x", metric="macro_f1", greater_is_better=True)
    ax = labelled(fig)
    assert "higher is better" in ax.get_xlabel()
    assert len(ax.patches) == 2
    assert not any(isinstance(c, ErrorbarContainer) for c in ax.containers)
    assert legend_texts(fig) == ["mean over every draw"]


def test_distribution_overlay_two_series_for_numbers_and_dates():
    rng = np.random.default_rng(0)
    fig = charts.distribution_overlay(rng.normal(size=200), rng.normal(size=20), column="t")
    ax = labelled(fig)
    assert len(ax.patches) == 2
    assert [p.get_hatch() for p in ax.patches] == [None, "////"]
    assert legend_texts(fig) == ["observed (200 values)", "filled (20 values)"]
    days = np.array(["2026-01-01", "2026-02-01", "2026-03-05"], dtype="datetime64[ns]")
    dated = charts.distribution_overlay(days, days[:1], column="departed_at")
    assert "(date)" in labelled(dated).get_xlabel()
    assert len(dated.axes[0].patches) == 2


def test_category_counts_two_bars_per_label():
    fig = charts.category_counts({"a": 5, "b": 3}, {"a": 6, "b": 3, "missing": 2},
                                 column="depot")
    ax = labelled(fig)
    assert len(ax.patches) == 6
    assert [t.get_text() for t in ax.get_yticklabels()] == ["a", "b", "missing"]
    assert sum(p.get_hatch() == "////" for p in ax.patches) == 3
    assert "2 (+2)" in [t.get_text() for t in ax.texts]
    assert legend_texts(fig) == ["before filling (observed)", "after filling"]


def test_predictability_dots_one_interval_per_column_and_chance_line():
    fig = charts.predictability_dots({"a": (0.5, 0.45, 0.56), "b": (0.9, 0.85, 0.95)})
    ax = labelled(fig)
    (bars,) = [c for c in ax.containers if isinstance(c, ErrorbarContainer)]
    assert len(bars.lines[0].get_xdata()) == 2
    chance = [line for line in ax.get_lines() if line.get_label().startswith("0.5")]
    assert chance[0].get_xdata()[0] == 0.5


def test_figure_svg_is_reproducible_self_contained_and_titled():
    def make():
        return charts.missing_bars({"a": 0.2, "b<c": 0.6}, 0.5, drop={"b<c"})

    before = dict(matplotlib.rcParams)
    first = charts.figure_svg(make(), alt="bars of <a & b>", prefix="c7")
    again = charts.figure_svg(make(), alt="bars of <a & b>", prefix="c7")
    assert first == again
    assert dict(matplotlib.rcParams) == before  # the caller's settings are left alone
    assert first.startswith("<svg") and "<metadata" not in first and "<!--" not in first
    assert re.match(r'<svg [^>]*role="img">', first)
    assert "<title>bars of &lt;a &amp; b&gt;</title>" in first
    assert "b&lt;c" in first and "b<c" not in first  # matplotlib escapes its text
    ids = re.findall(r'\sid="([^"]+)"', first)
    assert ids and all(i.startswith("c7-") for i in ids)
    for ref in re.findall(r'(?:url\(#|href="#)([^)"]+)', first):
        assert ref in ids
    # Namespace declarations name XML vocabularies; nothing else may hold an address.
    assert not re.search(r"https?://", re.sub(r'xmlns(:\w+)?="[^"]*"', "", first))


def test_ratio_bars_draws_one_bar_per_series_and_group_and_the_reference_line():
    groups = ["wine mcar", "wine mar", "gaussian mcar"]
    series = {"plan": [0.95, 0.97, 1.01], "blend": [0.96, np.nan, 1.0], "sk-simple": [1.4] * 3}
    fig = charts.ratio_bars(groups, series, ylabel="NRMSE / best reference", title="Ratios")
    ax = labelled(fig)
    assert ax.get_ylabel() == "NRMSE / best reference"
    assert sum(isinstance(c, BarContainer) for c in ax.containers) == 3
    assert len(ax.patches) == 9  # a NaN is a bar of no height, not a missing bar
    assert [t.get_text() for t in ax.get_xticklabels()] == groups
    (line,) = ax.get_lines()
    assert list(line.get_ydata()) == [1.0, 1.0]
    # Series differ by hatch as well as colour (no meaning by colour alone).
    hatches = [c.patches[0].get_hatch() for c in ax.containers]
    assert len(set(hatches)) == 3
    assert legend_texts(fig) == ["plan", "blend", "sk-simple", "reference = 1"]
