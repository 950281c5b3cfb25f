"""Charts of the report: pure functions from plain numbers to matplotlib figures, and SVG text.

Every builder takes plain values (numbers, arrays, mappings, a boolean matrix) and returns a
:class:`matplotlib.figure.Figure`; nothing here reads a file or knows what a plan is.
:func:`figure_svg` turns a figure into SVG text to inline in HTML, reproducible to the byte.

Figures are made with :class:`~matplotlib.figure.Figure` on an Agg canvas, never with
``pyplot``: no GUI backend, no global figure registry, nothing left open, and the caller's
matplotlib settings untouched (every builder runs under its own ``rc_context``).

No chart says anything by colour alone: the chosen method's bar is hatched and labelled
"chosen", filled values are drawn dashed and hatched beside the solid observed ones, columns
to drop are hatched and labelled, and every chart has a legend or direct labels.
"""

from __future__ import annotations

import io
from collections.abc import Collection, Mapping, Sequence
from contextlib import contextmanager

import matplotlib
import numpy as np
from matplotlib import dates as mdates
from matplotlib import ticker
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import PatchCollection
from matplotlib.figure import Figure
from matplotlib.patches import Patch, Rectangle

from imputelab.report.chart_style import (
    CHOSEN,
    FILLED,
    INK,
    MASK_MARKERS,
    OBSERVED,
    OTHER,
    PALETTE,
    PAPER,
    STYLE,
    WIDTH,
    fmt_share,
    inline_svg,
    pattern_order,
)

__all__ = [
    "PALETTE",
    "category_counts",
    "distribution_overlay",
    "figure_svg",
    "method_scores",
    "missing_bars",
    "missing_map",
    "pattern_order",
    "predictability_dots",
]

@contextmanager
def _style():
    with matplotlib.rc_context(STYLE):
        yield


def _figure(height: float, width: float = WIDTH) -> Figure:
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)  # text measurement for the layout; no GUI, no pyplot
    return fig


def _legend(fig: Figure, handles: list) -> None:
    """One legend under the chart, outside the axes, so it never covers a bar or a title."""
    fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 4))


def _rows_axes(fig: Figure, ax, names: Sequence[str], *, xlabel: str, ylabel: str, title: str,
               handles: list | None = None) -> None:
    """The common finish of a chart with one row per name: labels, grid, title, legend."""
    ax.set_yticks(np.arange(len(names)), list(names))
    ax.invert_yaxis()
    ax.grid(axis="x")
    ax.set_axisbelow(True)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    _legend(fig, handles if handles is not None else ax.get_legend_handles_labels()[0])


# ------------------------------------------------------------------------- where the holes are


def missing_map(blank: np.ndarray, columns: Sequence[str], *, total_rows: int | None = None
                ) -> Figure:
    """Rows x columns: a dark cell where a value is blank, rows grouped by pattern.

    Parameters
    ----------
    blank : ndarray of bool, shape (rows, columns)
        True where a cell is blank (already sampled, if the table is large).
    columns : sequence of str
    total_rows : int, optional
        Rows of the whole table, when ``blank`` is a sample of them (said in the axis label).

    Returns
    -------
    Figure
        One collection of rectangles (a run of blank rows in one column each).
    """
    blank = np.asarray(blank, dtype=bool)
    n_rows, n_cols = blank.shape
    ordered = blank[pattern_order(blank)]
    with _style():
        fig = _figure(height=4.2)
        ax = fig.add_subplot()
        boxes = []
        for j in range(n_cols):
            column = np.concatenate([[False], ordered[:, j], [False]]).astype(np.int8)
            edges = np.flatnonzero(np.diff(column))
            for start, stop in zip(edges[::2], edges[1::2], strict=True):
                boxes.append(Rectangle((j - 0.42, start), 0.84, stop - start))
        ax.add_collection(PatchCollection(boxes, facecolor=OBSERVED, edgecolor="none",
                                          label="blank"))
        ax.set_xlim(-0.5, n_cols - 0.5)
        ax.set_ylim(max(n_rows, 1), 0)
        ax.set_xticks(range(n_cols), [str(c) for c in columns], rotation=40, ha="right",
                      rotation_mode="anchor")
        ax.set_facecolor("#eef0f4")
        for side in ("left", "bottom"):
            ax.spines[side].set_visible(False)
        ax.tick_params(length=0)
        sampled = (f"{n_rows:,} of {total_rows:,} sampled"
                   if total_rows is not None and total_rows > n_rows else f"{n_rows:,}")
        ax.set_ylabel(f"row, by pattern ({sampled})")
        ax.set_xlabel("column")
        ax.set_title("Blank cells, row by row")
        _legend(fig, [Patch(facecolor=OBSERVED, label="blank"),
                      Patch(facecolor="#eef0f4", edgecolor=INK, linewidth=0.5,
                            label="has a value")])
    return fig


def missing_bars(fractions: Mapping[str, float], threshold: float,
                 drop: Collection[str] = ()) -> Figure:
    """Share of blank cells per column, the drop threshold drawn across.

    Columns in ``drop`` are hatched and labelled "drop"; every bar carries its percentage.

    Returns
    -------
    Figure
        One bar per column, one line for the threshold.
    """
    names = list(fractions)
    values = [float(fractions[n]) for n in names]
    with _style():
        fig = _figure(height=0.9 + 0.26 * max(len(names), 1))
        ax = fig.add_subplot()
        y = np.arange(len(names))
        bars = ax.barh(y, values, height=0.66, color=[FILLED if n in drop else OTHER
                                                      for n in names],
                       edgecolor=INK, linewidth=0.5)
        for bar, name in zip(bars, names, strict=True):
            if name in drop:
                bar.set_hatch("///")
        ax.axvline(threshold, color=INK, linestyle=(0, (4, 3)), linewidth=1.1,
                   label=f"drop threshold ({fmt_share(threshold)})")
        for i, (name, value) in enumerate(zip(names, values, strict=True)):
            label = fmt_share(value) + ("  drop" if name in drop else "")
            ax.text(value + 0.01, i, label, va="center", fontsize=8)
        ax.set_xlim(0, 1.12)
        ax.xaxis.set_major_formatter(ticker.PercentFormatter(1.0))
        handles = [ax.get_lines()[0], Patch(facecolor=OTHER, edgecolor=INK, label="kept")]
        if any(n in drop for n in names):
            handles.append(Patch(facecolor=FILLED, edgecolor=INK, hatch="///",
                                 label="to drop"))
        _rows_axes(fig, ax, names, xlabel="share of the column's cells that are blank",
                   ylabel="column", title="Blank share per column", handles=handles)
    return fig


# ------------------------------------------------------------------------------ the experiment


def method_scores(
    means: Mapping[str, float],
    errors: Mapping[str, float | None],
    *,
    column: str,
    metric: str,
    greater_is_better: bool = False,
    chosen: str | None = None,
    by_mask: Mapping[str, Mapping[str, float]] | None = None,
    spread: str = "1 SE",
    bound: bool = True,
) -> Figure:
    """Every method's mean score for one column, with error bars; the chosen one marked.

    Parameters
    ----------
    means : mapping
        ``{method: mean score}``, in the order to draw.
    errors : mapping
        ``{method: half-width of the error bar}`` (None or 0: no bar).
    column, metric : str
        For the title and the axis label.
    greater_is_better : bool
    chosen : str, optional
        The method the plan chose: hatched, orange and labelled "chosen".
    by_mask : mapping, optional
        ``{method: {mask: mean}}``: drawn as one marker shape per mask.
    spread : str
        What the error bars are (legend text).
    bound : bool
        Draw the best mean's one-SE bound (the line the unpaired one-SE rule chooses by);
        off for rules that judge by paired differences, which this chart does not show.

    Returns
    -------
    Figure
        One bar per method; an error-bar container; one marker series per mask; a line for
        the best mean's one-SE bound when error bars are given and ``bound``.
    """
    names = list(means)
    values = np.array([float(means[m]) for m in names])
    err = np.array([float(errors.get(m) or 0.0) for m in names])
    with _style():
        fig = _figure(height=1.2 + 0.32 * max(len(names), 1))
        ax = fig.add_subplot()
        y = np.arange(len(names))
        bars = ax.barh(y, values, height=0.62, color=[CHOSEN if m == chosen else OTHER
                                                      for m in names],
                       edgecolor=INK, linewidth=0.5)
        for bar, name in zip(bars, names, strict=True):
            if name == chosen:
                bar.set_hatch("xx")
        handles = [Patch(facecolor=OTHER, edgecolor=INK, label="mean over every draw")]
        if chosen in names:
            handles.append(Patch(facecolor=CHOSEN, edgecolor=INK, hatch="xx",
                                 label="chosen"))
        if err.any():
            bars_err = ax.errorbar(values, y, xerr=err, fmt="none", ecolor=INK, elinewidth=1.0,
                                   capsize=3, label=f"± {spread}")
            handles.append(bars_err)
        if err.any() and bound:
            best = int(np.argmax(values) if greater_is_better else np.argmin(values))
            bound = values[best] - err[best] if greater_is_better else values[best] + err[best]
            line = ax.axvline(bound, color=INK, linestyle=(0, (1, 2)), linewidth=1.1,
                              label=f"best {'-' if greater_is_better else '+'} {spread}")
            handles.append(line)
        handles.extend(_mask_marks(ax, names, y, by_mask or {}))
        _row_labels(ax, names, values, err, by_mask or {}, chosen)
        better = "higher" if greater_is_better else "lower"
        _rows_axes(fig, ax, names, xlabel=f"{metric} ({better} is better)", ylabel="method",
                   title=f"{column}: selection scores ({metric})", handles=handles)
    return fig


def _mask_marks(ax, names: Sequence[str], y: np.ndarray,
                by_mask: Mapping[str, Mapping[str, float]]) -> list:
    """One marker series per mask (when there are several) at each method's mean under it."""
    masks = sorted({k for v in by_mask.values() for k in v})
    handles = []
    if len(masks) > 1:
        for i, mask in enumerate(masks):
            xs = [by_mask.get(m, {}).get(mask) for m in names]
            keep = [k for k, v in enumerate(xs) if v is not None]
            dots = ax.plot([xs[k] for k in keep], [y[k] for k in keep],
                           linestyle="none", marker=MASK_MARKERS[i % len(MASK_MARKERS)],
                           markersize=4.5, markerfacecolor=PAPER, markeredgecolor=INK,
                           markeredgewidth=0.9, label=f"mean under {mask}")
            handles.append(dots[0])
    return handles


def _row_labels(ax, names: Sequence[str], values: np.ndarray, err: np.ndarray,
                by_mask: Mapping[str, Mapping[str, float]], chosen: str | None) -> None:
    """Each row's value (and "chosen"), right of all drawn on that row; the x limits to fit."""
    right = values + err
    for i, name in enumerate(names):
        marks = [v for v in by_mask.get(name, {}).values() if v is not None]
        right[i] = max([right[i], *marks])
    top = float(np.nanmax(right)) if len(values) else 1.0
    for i, name in enumerate(names):
        text = f"{values[i]:.3g}" + ("  chosen" if name == chosen else "")
        ax.text(right[i] + top * 0.02, i, text, va="center", fontsize=8,
                fontweight="bold" if name == chosen else "normal")
    ax.set_xlim(0, top * 1.28 if top > 0 else 1.0)


# --------------------------------------------------------------------------- what filling does


def _as_numbers(values: np.ndarray) -> tuple[np.ndarray, bool]:
    values = np.asarray(values)
    if np.issubdtype(values.dtype, np.datetime64):
        # Days since 1970-01-01, matplotlib's own date unit, so the date axis reads them.
        seconds = values.astype("datetime64[s]").astype("int64").astype(float)
        return seconds / 86400.0, True
    return values.astype(float), False


def distribution_overlay(observed: np.ndarray, filled: np.ndarray, *, column: str,
                         bins: int = 30) -> Figure:
    """Observed values against the values filled in, as two histograms of shares.

    Each histogram sums to 1, so a column with few holes still shows the shape of its fills.
    Observed values are a solid outlined area; filled values a dashed, hatched outline.
    Datetime arrays are drawn on a date axis.

    Returns
    -------
    Figure
        Two patches (one per histogram) and a legend naming both with their counts.
    """
    obs, dates = _as_numbers(observed)
    new, _ = _as_numbers(filled)
    obs, new = obs[np.isfinite(obs)], new[np.isfinite(new)]
    both = np.concatenate([obs, new])
    low, high = (float(both.min()), float(both.max())) if len(both) else (0.0, 1.0)
    if high <= low:
        low, high = low - 0.5, high + 0.5
    edges = np.linspace(low, high, bins + 1)
    with _style():
        fig = _figure(height=2.6)
        ax = fig.add_subplot()
        ax.hist(obs, bins=edges, weights=np.full(len(obs), 1 / max(len(obs), 1)),
                histtype="stepfilled", facecolor=OBSERVED + "59", edgecolor=OBSERVED,
                linewidth=1.2, label=f"observed ({len(obs):,} values)")
        ax.hist(new, bins=edges, weights=np.full(len(new), 1 / max(len(new), 1)),
                histtype="step", edgecolor=FILLED, linewidth=1.6, linestyle=(0, (4, 2)),
                hatch="////", label=f"filled ({len(new):,} values)")
        if dates:
            ax.xaxis_date()
            ax.xaxis.set_major_formatter(mdates.DateFormatter("%Y-%m-%d"))
        ax.yaxis.set_major_formatter(ticker.PercentFormatter(1.0, decimals=0))
        ax.grid(axis="y")
        ax.set_axisbelow(True)
        ax.set_xlabel(f"{column} (date)" if dates else column)
        ax.set_ylabel("share of values in the bin")
        ax.set_title(f"{column}: observed and filled values")
        _legend(fig, ax.get_legend_handles_labels()[0])
    return fig


def category_counts(before: Mapping[str, int], after: Mapping[str, int], *,
                    column: str) -> Figure:
    """Rows per label before the fill (observed only) and after it, side by side.

    Returns
    -------
    Figure
        Two bars per label: "before" solid, "after" hatched, with a legend.
    """
    labels = list(dict.fromkeys([*after, *before]))
    with _style():
        fig = _figure(height=1.1 + 0.36 * max(len(labels), 1))
        ax = fig.add_subplot()
        y = np.arange(len(labels))
        first = [int(before.get(k, 0)) for k in labels]
        second = [int(after.get(k, 0)) for k in labels]
        ax.barh(y - 0.19, first, height=0.36, color=OBSERVED, edgecolor=INK, linewidth=0.5,
                label="before filling (observed)")
        ax.barh(y + 0.19, second, height=0.36, color=FILLED, edgecolor=INK, linewidth=0.5,
                hatch="////", label="after filling")
        top = max([*first, *second, 1])
        for i in range(len(labels)):
            gain = second[i] - first[i]
            ax.text(second[i] + top * 0.01, y[i] + 0.19, f"{second[i]:,} (+{gain:,})",
                    va="center", fontsize=7.5)
        ax.set_xlim(0, top * 1.22)
        _rows_axes(fig, ax, labels, xlabel="rows", ylabel="label",
                   title=f"{column}: rows per label before and after filling")
    return fig


# -------------------------------------------------------------------------------- diagnostics


def predictability_dots(checks: Mapping[str, tuple[float, float, float]]) -> Figure:
    """Per column, how well the other columns predict its blanks: AUC with its 95% interval.

    Parameters
    ----------
    checks : mapping
        ``{column: (auc, low, high)}``.

    Returns
    -------
    Figure
        One error-bar series (dots and intervals) and a line at 0.5, chance.
    """
    names = list(checks)
    auc = np.array([checks[n][0] for n in names], dtype=float)
    low = np.array([checks[n][1] for n in names], dtype=float)
    high = np.array([checks[n][2] for n in names], dtype=float)
    with _style():
        fig = _figure(height=1.1 + 0.3 * max(len(names), 1))
        ax = fig.add_subplot()
        y = np.arange(len(names))
        ax.errorbar(auc, y, xerr=[auc - low, high - auc], fmt="o", color=INK,
                    markerfacecolor=PALETTE["green"], markersize=5, capsize=3,
                    label="AUC with its 95% interval")
        ax.axvline(0.5, color=INK, linestyle=(0, (4, 3)), linewidth=1.0,
                   label="0.5: no better than chance")
        for i in range(len(names)):
            ax.text(min(high[i] + 0.015, 1.02), i, f"{auc[i]:.2f}", va="center", fontsize=8)
        ax.set_xlim(0.3, 1.08)
        _rows_axes(fig, ax, names,
                   xlabel="AUC of predicting where the column is blank from the other columns",
                   ylabel="column", title="Can the other columns tell where the blanks are?")
    return fig


# ------------------------------------------------------------------------------------- to SVG

def ratio_bars(groups: Sequence[str], series: Mapping[str, Sequence[float]], *,
               ylabel: str, title: str) -> Figure:
    """Grouped bars of ratios to a reference, with the reference drawn at 1.

    Parameters
    ----------
    groups : sequence of str
        One group of bars per entry (e.g. ``"wine mcar"``).
    series : mapping
        ``{name: one ratio per group}``; NaN leaves a gap. Series are told apart by colour
        and by hatch, so the chart reads in black and white too.
    ylabel, title : str

    Returns
    -------
    Figure
        One bar per (series, group), one line at 1.
    """
    colours = list(PALETTE.values())
    hatches = ("", "//", "..", "xx", "\\\\", "++", "oo", "--")
    names = list(series)
    width = 0.8 / max(len(names), 1)
    x = np.arange(len(groups))
    with _style():
        fig = _figure(height=4.2, width=max(WIDTH, 0.9 * len(groups)))
        ax = fig.add_subplot()
        handles = []
        for k, name in enumerate(names):
            handles.append(ax.bar(x + k * width, np.asarray(series[name], float), width, label=name,
                   color=colours[k % len(colours)], edgecolor=INK, linewidth=0.4,
                   hatch=hatches[(k // len(colours) + k) % len(hatches)]))
        handles.append(ax.axhline(1.0, color=INK, linewidth=0.9, label="reference = 1"))
        ax.set_xticks(x + 0.4 - width / 2, list(groups), fontsize=7, rotation=30, ha="right")
        ax.grid(axis="y")
        ax.set_axisbelow(True)
        ax.set_xlabel("dataset and mask")
        ax.set_ylabel(ylabel)
        ax.set_title(title)
        _legend(fig, handles)
    return fig


def figure_svg(fig: Figure, *, alt: str, prefix: str) -> str:
    """The figure as SVG text to inline in HTML, the same bytes for the same figure.

    The XML prologue, the DOCTYPE and matplotlib's ``<metadata>`` (creator and links) go;
    ids no element refers to are dropped and the others get ``prefix``, so many charts can
    share one page; ``alt`` becomes the SVG's ``<title>`` (its text alternative).

    Parameters
    ----------
    fig : Figure
    alt : str
        A sentence saying what the chart shows; it is XML-escaped here.
    prefix : str
        Unique per chart in the page (letters, digits, ``-``).
    """
    buffer = io.StringIO()
    with _style():
        fig.savefig(buffer, format="svg", metadata={"Date": None, "Creator": None})
    return inline_svg(buffer.getvalue(), alt=alt, prefix=prefix)
