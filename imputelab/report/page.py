"""The report: one self-contained HTML file that shows a reviewer what was found and decided.

:func:`build_report` reads the file the way the plan says, fills it in memory with the fill
engine (as ``imputelab fill`` would), takes the survey's evidence, and returns the page;
:func:`write_report` writes it atomically. Nothing is re-scored: the experiment's numbers
come from the plan, and so do the survey's checks when the plan stores them
(:attr:`~imputelab.score.plan.Plan.survey`); only an older plan, or other survey options,
has the file surveyed again.

The page needs nothing outside itself: the style sheet is inline, the charts are inline SVG
made by :mod:`imputelab.report.charts`, there is no script, and a Content-Security-Policy forbids
the browser to fetch anything. Every piece of text that comes from the file (column names,
labels, rules) is escaped with :func:`html.escape`.

Sections, in order (:data:`SECTIONS`); each is one ``_section_*`` function taking the
gathered :class:`_Facts` and returning HTML. To add one, write the function and add it to
:data:`SECTIONS`.
"""

from __future__ import annotations

import html
import math
import platform
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from imputelab.errors import OptionError
from imputelab.executors.seeds import derive_seed
from imputelab.fill.frame import FillReport, checked_clean, fill_frame
from imputelab.io.columns import INDICATOR_SUFFIX
from imputelab.io.tables import Table, atomic_path
from imputelab.metrics.scores import get_metric
from imputelab.score.plan import Plan
from imputelab.survey.diagnostics import CAUTION, missing_patterns
from imputelab.survey.table import DEFAULT_DROP_THRESHOLD, Survey, SurveyOptions, survey_table

__all__ = ["MAP_ROWS", "SECTIONS", "build_report", "survey_options_for", "write_report"]

#: Rows drawn in the map of blank cells; a larger table is shown by a uniform sample.
MAP_ROWS = 1000
#: Labels shown per categorical column (the rest are summed into one bar).
TOP_LABELS = 12
#: Rows of the pattern table.
PATTERNS_SHOWN = 12
#: Packages whose versions the overview lists.
VERSIONS = ("imputelab", "numpy", "pandas", "scipy", "scikit-learn", "lightgbm", "pyarrow",
            "matplotlib")

CAUTIONS = (
    "Filled values are estimates, not measurements. They are the plan's best guess of what "
    "the blank cells would have held; keep them marked (the plan's indicator columns) and do "
    "not report them as observed data.",
    "Imputing can bias what is computed afterwards. Under MNAR, when a value's chance of being "
    "blank depends on the value itself, every method here can be biased, and no test on the "
    "data alone can show it: the experiment hides cells by rules it knows, not by the rule "
    "that made the real blanks.",
    "Record the plan with the analysis: plan.json says, column by column, what was filled, "
    "how and why, so the fill can be checked and repeated.",
    "In regulated or safety-relevant work (clinical studies, financial reporting, decisions "
    "that affect people) follow the field's own rules for missing data and have the plan "
    "reviewed by someone qualified before results are used.",
)


def e(value: Any) -> str:
    """Escape text from the file or the plan for HTML."""
    return html.escape(str(value), quote=True)


def _version(package: str) -> str:
    try:
        return version(package)
    except PackageNotFoundError:
        return "not installed"


# ------------------------------------------------------------------------------ gathering


@dataclass
class _Facts:
    """What the sections draw on."""

    table: Table
    plan: Plan
    survey: Survey | None
    typed: pd.DataFrame  # the file as the plan reads it
    filled: pd.DataFrame  # after the plan's fill (dropped columns removed)
    fill: FillReport
    charts: Any  # the imputelab.report.charts module, imported when a report is made
    table_wide: dict[str, Any] | None = None  # Little's test and co-missingness, if checked
    figures: list[str] = field(default_factory=list)

    def blank(self) -> pd.DataFrame:
        """True where a cell of the file is blank (text columns: empty after stripping)."""
        out = {}
        for name in self.typed.columns:
            values = self.typed[name]
            mask = values.isna()
            if pd.api.types.is_string_dtype(values.dtype):
                mask = mask | values.fillna("").astype("str").str.strip().eq("")
            out[name] = mask.to_numpy(bool)
        return pd.DataFrame(out, index=self.typed.index)

    def evidence(self, name: str) -> dict[str, Any]:
        """A column's evidence: from this survey, else from the plan."""
        if self.survey is not None and self.survey.evidence is not None:
            return self.survey.columns[name].evidence
        col = self.plan.columns.get(name)
        return dict(col.evidence) if col is not None else {}

    def chart(self, fig: Any, *, alt: str, caption: str) -> str:
        """A figure as an inline SVG with its caption (the alt text is the SVG title)."""
        prefix = f"c{len(self.figures) + 1}"
        svg = self.charts.figure_svg(fig, alt=alt, prefix=prefix)
        self.figures.append(prefix)
        return (f'<figure class="chart" id="{prefix}">{svg}'
                f"<figcaption>{e(caption)}</figcaption></figure>")


def survey_options_for(plan: Plan, given: SurveyOptions | None = None, *,
                       drop_threshold: float | None = None) -> SurveyOptions:
    """Survey settings that read a file as the plan did; what ``given`` says wins.

    The plan records every column's cleaning: kinds the user set (or edited in the plan),
    confirmed missing codes and date formats; the drop threshold, the target and the seed
    are in its settings.

    Parameters
    ----------
    plan : Plan
    given : SurveyOptions, optional
        Options from the command line (``--kind``, ``--missing-code``, ...); a column named
        there is read as they say.
    drop_threshold : float, optional
        Overrides the plan's threshold.
    """
    given = given or SurveyOptions()
    kinds, codes, formats = {}, {}, {}
    for name, col in plan.columns.items():
        cleaning = col.cleaning or {}
        if cleaning.get("kind_source", "inferred") != "inferred" or cleaning.get(
                "kind", col.kind) != col.kind:
            kinds[name] = col.kind
        if cleaning.get("missing_codes"):
            codes[name] = list(cleaning["missing_codes"])
        if col.kind == "datetime" and cleaning.get("date_format"):
            formats[name] = cleaning["date_format"]
    settings = plan.settings
    threshold = drop_threshold if drop_threshold is not None else settings.get(
        "drop_threshold", DEFAULT_DROP_THRESHOLD)
    return SurveyOptions(
        kinds={**kinds, **given.kinds},
        missing_codes={**codes, **given.missing_codes},
        date_formats={**formats, **given.date_formats},
        drop_threshold=float(threshold),
        target=given.target if given.target is not None else settings.get("target"),
        diagnostics=given.diagnostics,
        n_jobs=given.n_jobs,
        seed=int(settings.get("seed", given.seed)),
    )


# ------------------------------------------------------------------------------- sections


def _table(head: list[str], rows: list[list[str]], *, numeric: set[int] | frozenset = frozenset(),
           cls: str = "") -> str:
    """An HTML table from cells that are already HTML (escape before calling)."""
    ths = "".join(f'<th{" class=num" if i in numeric else ""}>{h}</th>'
                  for i, h in enumerate(head))
    body = "".join(
        "<tr>" + "".join(f'<td{" class=num" if i in numeric else ""}>{c}</td>'
                         for i, c in enumerate(row)) + "</tr>" for row in rows)
    return f'<table class="{cls}"><thead><tr>{ths}</tr></thead><tbody>{body}</tbody></table>'


def _code(name: Any) -> str:
    return f"<code>{e(name)}</code>"


def _pct(value: float) -> str:
    return f"{value:.1%}" if value < 0.995 or value == 1 else f"{value:.2%}"


def _num(value: Any, digits: int = 4) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    value = float(value)
    if 10 ** digits <= abs(value) < 1e15:  # whole thousands read better than 1.2e+04
        return f"{value:,.0f}"
    return f"{value:.{digits}g}"


def _section_overview(facts: _Facts) -> str:
    plan, settings = facts.plan, facts.plan.settings
    rows, cols = facts.typed.shape
    blank = facts.blank()
    overall = float(blank.to_numpy().mean()) if blank.size else 0.0
    actions = {a: [n for n, c in plan.columns.items() if c.action == a]
               for a in ("impute", "drop", "exclude")}
    filled = sum(facts.fill.filled.values())
    strip = "".join(
        f'<div class="stat"><span class="big">{big}</span><span class="small">{small}</span>'
        f"</div>" for big, small in (
            (f"{rows:,}", "rows"), (f"{cols:,}", "columns"), (_pct(overall), "of cells blank"),
            (f"{len(actions['impute'])}", "columns to fill"),
            (f"{filled:,}", "cells filled"), (f"{len(actions['drop'])}", "columns dropped")))
    out = [
        f"<p>This report shows how imputelab read {_code(facts.table.path.name)}, where its "
        "cells are blank, how every fill method did when known cells were hidden and filled "
        "again, which method each column gets and why, and what filling does to the values. "
        "<strong>Filled values are estimates, not measurements.</strong></p>",
        f'<div class="strip">{strip}</div>',
        "<h3>The plan at a glance</h3>",
    ]
    body = []
    for name, col in plan.columns.items():
        method = e(col.method or "") + (" + indicator" if col.indicator else "")
        body.append([_code(name), e(col.kind), _pct(col.missing_fraction),
                     f'<span class="act act-{e(col.action)}">{e(col.action)}</span>',
                     method or "&mdash;"])
    out.append(_table(["column", "kind", "blank", "action", "method"], body, numeric={2}))
    for action, title in (("drop", "Columns dropped, and why"),
                          ("exclude", "Columns passed through unchanged, and why")):
        if actions[action]:
            items = "".join(f"<li>{_code(n)}: {e(plan.columns[n].reason)}</li>"
                            for n in actions[action])
            out.append(f"<h3>{title}</h3><ul>{items}</ul>")
    if not actions["drop"]:
        threshold = settings.get("drop_threshold", DEFAULT_DROP_THRESHOLD)
        out.append(f"<p>No column is dropped: none is blank in more than "
                   f"{_pct(float(threshold))} of its cells.</p>")
    masks = ", ".join(settings.get("masks", [])) or "none"
    experiment = [
        ("masks (how known cells were hidden)", e(masks)),
        ("share of observed cells hidden per draw", _pct(float(settings.get("rate", 0)))),
        ("repeats per mask", e(settings.get("repeats", ""))),
        ("seed", e(settings.get("seed", ""))),
        ("candidate methods", e(", ".join(settings.get("methods", [])))),
        ("primary metrics", e(", ".join(f"{k}: {v}" for k, v in
                                         (settings.get("metrics") or {}).items()))),
        ("choice rule", e(settings.get("choice", ""))),
        ("rows used by the experiment", f"{settings.get('experiment_rows', rows):,} of "
                                        f"{plan.source.get('rows', rows):,}"),
        ("drop threshold", _pct(float(settings.get("drop_threshold", DEFAULT_DROP_THRESHOLD)))),
        ("target", _code(settings["target"]) if settings.get("target") else "none"),
    ]
    out.append("<h3>Experiment settings</h3><dl class='settings'>" + "".join(
        f"<dt>{k}</dt><dd>{v}</dd>" for k, v in experiment) + "</dl>")
    versions = [["Python", e(platform.python_version())]] + [
        [e(p), e(_version(p))] for p in VERSIONS]
    out.append("<h3>Software</h3>" + _table(["package", "version"], versions, cls="narrow"))
    out.append(f"<p class='small'>The plan was made by imputelab "
               f"{e(settings.get('imputelab_version', 'unknown'))} from "
               f"{_code(plan.source.get('file', ''))} "
               f"({e(plan.source.get('fingerprint', 'no fingerprint'))}).</p>")
    if facts.fill.warnings:
        items = "".join(f"<li>{e(w)}</li>" for w in facts.fill.warnings)
        out.append(f"<div class='note'><strong>Notes from the fill</strong><ul>{items}</ul></div>")
    return "".join(out)


def _section_holes(facts: _Facts) -> str:
    charts, plan = facts.charts, facts.plan
    blank = facts.blank()
    n = len(blank)
    shown = blank
    if n > MAP_ROWS:
        rng = np.random.default_rng(derive_seed(int(plan.settings.get("seed", 0)), "report-map"))
        shown = blank.iloc[np.sort(rng.choice(n, MAP_ROWS, replace=False))]
    sample_note = (f" The table has {n:,} rows; the map shows a uniform random sample of "
                   f"{MAP_ROWS:,} of them." if n > MAP_ROWS else "")
    out = ["<p>Every blank cell of the file, as the plan reads it (disguised blanks such as "
           "'n/a' and confirmed missing codes count as blank). Rows with the same columns "
           f"blank are grouped, the commonest group at the top.{e(sample_note)}</p>"]
    fig = charts.missing_map(shown.to_numpy(), list(shown.columns),
                             total_rows=n if n > MAP_ROWS else None)
    worst = blank.mean().sort_values(ascending=False)
    alt = (f"Map of blank cells over {len(shown):,} rows and {blank.shape[1]} columns; the "
           f"most blank column is {worst.index[0]} ({worst.iloc[0]:.0%})." if len(worst) else
           "Map of blank cells.")
    out.append(facts.chart(fig, alt=alt, caption="Blank cells, row by row. Dark: blank; "
                           "light: a value. The pattern table below gives the same groups "
                           "as numbers."))
    patterns = missing_patterns(blank, max_patterns=PATTERNS_SHOWN)
    rows = [[f"{count:,}", _pct(count / n if n else 0.0),
             ", ".join(_code(c) for c in names) if names else "<em>none: complete row</em>"]
            for names, count in patterns.patterns]
    rest = (f" {patterns.truncated} rarer patterns are not listed." if patterns.truncated
            else "")
    out.append(f"<h3>Patterns of blanks</h3><p>{patterns.n_patterns} distinct patterns; "
               f"{patterns.complete_rows:,} of {n:,} rows have no blank cell.{e(rest)}</p>")
    out.append(_table(["rows", "share", "blank columns"], rows, numeric={0, 1}))
    threshold = float(plan.settings.get("drop_threshold", DEFAULT_DROP_THRESHOLD))
    fractions = {name: col.missing_fraction for name, col in plan.columns.items()}
    drop = {name for name, col in plan.columns.items() if col.action == "drop"}
    fig = charts.missing_bars(fractions, threshold, drop)
    alt = (f"Bar chart of the blank share of each of {len(fractions)} columns, with the drop "
           f"threshold at {threshold:.0%}; columns to drop: "
           f"{', '.join(sorted(drop)) if drop else 'none'}.")
    out.append("<h3>Blank share per column</h3>")
    out.append(facts.chart(fig, alt=alt, caption=f"Share of each column's cells that are "
                           f"blank. The dashed line is the drop threshold ({threshold:.0%}); "
                           "hatched bars marked 'drop' are removed by the plan. A column "
                           "blank only where a structural rule says no value applies is kept."))
    return "".join(out)


def _greater_is_better(metric: str) -> bool:
    try:
        return get_metric(metric).greater_is_better
    except OptionError:  # distribution and balanced: combined scores, lower is better
        return False


def _section_experiment(facts: _Facts) -> str:
    plan, charts, settings = facts.plan, facts.charts, facts.plan.settings
    masks = list(settings.get("masks", []))
    # Plans written before the choice rules had names used the unpaired one-SE rule.
    one_se_bound = settings.get("choice_rule", "unpaired") == "unpaired"
    out = [f"<p>For every column to fill, known cells were hidden ({e(', '.join(masks))}; "
           f"{_pct(float(settings.get('rate', 0)))} of the observed cells per draw, "
           f"{e(settings.get('repeats', ''))} draw(s) per mask), filled by every candidate "
           "method, and compared with the values that had been hidden. The bars are the mean "
           "score over every draw, the error bars one standard error of that mean, the "
           "markers the mean under each mask"
           + (", the dotted line one standard error from the best mean" if one_se_bound
              else "") + ". Rule: "
           f"{e(settings.get('choice', ''))}.</p>"]
    scored = [n for n, c in plan.columns.items() if c.scores and c.action == "impute"]
    for name in scored:
        col = plan.columns[name]
        metric = plan.ranking_metric(col.kind)
        entries = {m: s for m, s in col.scores.items() if s.get(metric) is not None}
        if not entries:
            continue
        structural = col.reason.startswith("structural blank")
        chosen = col.method if col.method in entries and not structural else None
        means = {m: s[metric] for m, s in entries.items()}
        errors = {m: s.get(f"{metric}_se") for m, s in entries.items()}
        by_mask = {m: {k.split("@", 1)[1]: v for k, v in s.items()
                       if k.startswith(f"{metric}@") and v is not None}
                   for m, s in entries.items()}
        greater = _greater_is_better(metric)
        fig = charts.method_scores(means, errors, column=name, metric=metric,
                                   greater_is_better=greater, chosen=chosen, by_mask=by_mask,
                                   bound=one_se_bound)
        best = (max if greater else min)(means, key=means.get)
        alt = (f"{name}: {metric} of {len(means)} methods; best mean {best} "
               f"({means[best]:.3g}); chosen {col.method}.")
        out.append(f'<article class="column"><h3>{_code(name)} <span class="kind">'
                   f"{e(col.kind)}</span></h3>")
        out.append(facts.chart(fig, alt=alt, caption=(
            f"{metric} of every method on {name} ({'higher' if greater else 'lower'} is "
            f"better). " + (f"Chosen: {col.method} (hatched, labelled)." if chosen else
                            f"Filled by its structural rule with {col.method}, not by the "
                            "experiment's ranking."))))
        label = "chosen by the rule" if chosen else "filled by its structural rule"
        out.append(f"<p class='why'><span class='tag'>{e(label)}</span> "
                   f"<strong>{e(col.method)}</strong>: {e(col.reason)}</p>")
        cells = []
        for method, s in entries.items():
            per_mask = "; ".join(f"{k}: {_num(v, 3)}" for k, v in by_mask[method].items())
            mark = " <span class='tag'>chosen</span>" if method == chosen else ""
            cells.append([e(method) + mark, _num(s[metric]), _num(s.get(f"{metric}_se"), 2),
                          e(per_mask), e(s.get("draws", ""))])
        out.append(_table(["method", f"mean {e(metric)}", "SE", "mean per mask", "draws"],
                          cells, numeric={1, 2, 4}))
        if col.skipped:
            items = "".join(f"<li>{e(m)}: {e(why)}</li>" for m, why in col.skipped.items())
            out.append(f"<p class='small'>Methods that could not fill it:</p><ul>{items}</ul>")
        out.append("</article>")
    unscored = [n for n, c in plan.columns.items()
                if c.action == "impute" and n not in scored]
    if unscored:
        items = "".join(f"<li>{_code(n)}: <strong>{e(plan.columns[n].method)}</strong>: "
                        f"{e(plan.columns[n].reason)}</li>" for n in unscored)
        out.append(f"<h3>Columns filled without a contest</h3><ul>{items}</ul>")
    if not scored:
        out.append("<p>No column was scored: the experiment had nothing to test.</p>")
    out.append(_downstream(plan))
    return "".join(out)


def _downstream(plan: Plan) -> str:
    down = plan.downstream
    if isinstance(down.get("skipped"), str):
        return f"<h3>Models of the target</h3><p>Skipped: {e(down['skipped'])}.</p>"
    if not down.get("candidates"):
        return ""
    models = ("lightgbm", "linear")
    rows = []
    for name, entry in down["candidates"].items():
        cells = [e(name)]
        for model in models:
            score = entry.get(model, {})
            star = (" <span class='tag'>best</span>" if down.get("best", {}).get(model) == name
                    else "")
            cells.append("n/a" if score.get("mean") is None else
                         f"{score['mean']:.4f} ± {score.get('se', 0):.4f}{star}")
        rows.append(cells)
    target = plan.settings.get("target")
    return (f"<h3>Models of the target {_code(target)} after each fill</h3>"
            f"<p>{e(down.get('metric', ''))} (higher is better), mean ± standard error over "
            f"{e(down.get('n_splits', ''))} folds. The target only scores the models here; it "
            "never fills a feature.</p>" + _table(["fill", *models], rows, numeric={1, 2}))


def _summary_row(label: str, values: pd.Series, dates: bool) -> list[str]:
    if not len(values):
        return [label, "0", "", "", "", ""]
    if dates:
        stamp = pd.to_datetime(values)
        show = [str(stamp.mean().round("min")), str(stamp.std().round("min")),
                str(stamp.min()), str(stamp.max())]
    else:
        number = values.astype(float)
        show = [_num(number.mean()), _num(number.std(ddof=1) if len(number) > 1 else None),
                _num(number.min()), _num(number.max())]
    return [label, f"{len(values):,}", *[e(s) for s in show]]


def _counts(values: pd.Series, top: list[str]) -> dict[str, int]:
    text = values.dropna().astype("str")
    counts = text.value_counts()
    out = {label: int(counts.get(label, 0)) for label in top}
    rest = int(counts.drop(labels=[t for t in top if t in counts.index]).sum())
    if rest:
        out["(other labels)"] = rest
    return out


def _section_filling(facts: _Facts) -> str:
    plan, charts = facts.plan, facts.charts
    total = sum(facts.fill.filled.values())
    out = [f"<p>The plan was applied to {_code(facts.table.path.name)} in memory, exactly as "
           f"<code>imputelab fill</code> would: {total:,} cells filled. Each chart compares "
           "the values the file already had with the values filled in. A fill that is much "
           "narrower than the observed spread (a single spike for a mean or a constant) keeps "
           "averages but shrinks variation and correlations.</p>"]
    empty = []
    for name in facts.fill.filled:
        col = plan.columns[name]
        holes = facts.typed[name].isna().to_numpy()
        if not holes.any():
            empty.append(name)
            continue
        observed = facts.typed[name][~holes]
        filled = facts.filled[name][holes]
        out.append(f'<article class="column"><h3>{_code(name)} <span class="kind">'
                   f"{e(col.kind)}</span> <span class='small'>{int(holes.sum()):,} cells "
                   f"filled by {e(facts.fill.methods.get(name, col.method))}</span></h3>")
        if col.kind in ("numeric", "datetime"):
            dates = col.kind == "datetime"
            as_array = (lambda s: s.to_numpy("datetime64[ns]")) if dates else (
                lambda s: s.to_numpy(float, na_value=np.nan))
            fig = charts.distribution_overlay(as_array(observed), as_array(filled), column=name)
            alt = (f"{name}: histogram of {len(observed):,} observed values overlaid with "
                   f"{len(filled):,} filled values.")
            out.append(facts.chart(fig, alt=alt, caption=(
                f"{name}: observed values (solid area) and filled values (dashed, hatched "
                "outline), each as shares of its own count.")))
            out.append(_table(["values", "count", "mean", "SD", "min", "max"],
                              [_summary_row("observed", observed, dates),
                               _summary_row("filled", filled, dates)], numeric={1, 2, 3, 4, 5}))
        else:
            after = facts.filled[name]
            ranked = after.dropna().astype("str").value_counts()
            top = list(ranked.index[:TOP_LABELS])
            before = _counts(observed, top)
            later = _counts(after, top)
            fig = charts.category_counts(before, later, column=name)
            gained = sorted(((later[k] - before.get(k, 0), k) for k in later), reverse=True)
            alt = (f"{name}: rows per label before and after filling; most rows added to "
                   f"{gained[0][1]} (+{gained[0][0]}).") if gained else f"{name}: label counts."
            shown = (f" The {TOP_LABELS} commonest labels are shown; the others are summed."
                     if len(ranked) > TOP_LABELS else "")
            out.append(facts.chart(fig, alt=alt, caption=(
                f"{name}: rows per label before filling (observed, solid) and after (hatched); "
                f"the number beside each bar is its count after filling and the rows added."
                f"{shown}")))
        if col.indicator:
            out.append(f"<p class='small'>The fill adds {_code(name + INDICATOR_SUFFIX)} "
                       "(1 where the value was filled) so later analysis can tell the rows "
                       "apart.</p>")
        out.append("</article>")
    if empty:
        out.append("<p>No blanks to fill in this file: "
                   + ", ".join(_code(n) for n in empty) + ".</p>")
    if not facts.fill.filled:
        out.append("<p>The plan fills no column.</p>")
    return "".join(out)


def _section_diagnostics(facts: _Facts) -> str:
    charts, plan = facts.charts, facts.plan
    table_wide = facts.table_wide
    out = []
    out.append("<h3>Little's MCAR test</h3>")
    if table_wide is None:
        out.append("<p>Not run: the survey's checks were switched off (--no-checks).</p>")
    else:
        test = table_wide["mcar_test"]
        if test["testable"]:
            out.append(f"<p>On {len(test['columns'])} numeric columns: d² = "
                       f"{test['statistic']:.1f}, df = {test['df']}, p = "
                       f"{test['p_value']:.3g}, over {test['patterns']} patterns of blanks. "
                       f"{e(test['note'])}</p>")
        else:
            out.append(f"<p>Not testable. {e(test['note'])}</p>")
    checks, rows = {}, []
    for name in plan.columns:
        check = (facts.evidence(name) or {}).get("missingness")
        if not check:
            continue
        auc = check.get("auc")
        if auc is not None:
            checks[name] = (auc, check["auc_low"], check["auc_high"])
        interval = ("" if auc is None else
                    f"{auc:.2f} ({check['auc_low']:.2f}&ndash;{check['auc_high']:.2f})")
        rows.append([_code(name), e(check.get("verdict", "")), interval,
                     e(", ".join(check.get("drivers") or [])), e(check.get("n_missing", ""))])
    out.append("<h3>Can the blanks be predicted from the other columns?</h3>")
    if rows:
        out.append("<p>A classifier tries to tell, from the other columns, which rows are "
                   "blank in each column; its cross-validated AUC is 0.5 when it cannot "
                   "(no detectable dependence) and near 1 when it can (the blanks depend on "
                   "observed values: MAR evidence).</p>")
        if checks:
            fig = charts.predictability_dots(checks)
            alt = "AUC with 95% interval per column: " + "; ".join(
                f"{n} {v[0]:.2f}" for n, v in checks.items()) + "."
            out.append(facts.chart(fig, alt=alt, caption=(
                "AUC of predicting each column's blanks, with its 95% interval; the dashed "
                "line at 0.5 is chance.")))
        out.append(_table(["column", "verdict", "AUC (95% interval)", "drivers", "blanks"],
                          rows, numeric={4}))
    else:
        out.append("<p>Not available: no column's blanks were checked.</p>")
    rules = []
    for name in plan.columns:
        for rule in (facts.evidence(name) or {}).get("structural") or []:
            rules.append([_code(name), e(rule["when"]), f"{rule['support']:,}",
                          _pct(float(rule["confidence"])), f"{rule['unexplained']:,}"])
    out.append("<h3>Structural blanks</h3>")
    if rules:
        out.append("<p>Rules under which a blank means 'does not apply' rather than "
                   "'unknown'; such a column is filled with a constant that says so.</p>")
        out.append(_table(["column", "blank when", "rows", "of them blank",
                           "blanks outside the rule"], rows=rules, numeric={2, 3, 4}))
    else:
        out.append("<p>No rule found that explains a column's blanks by another column.</p>")
    hints = [(n, h) for n in plan.columns for h in (facts.evidence(n) or {}).get("hints", [])]
    if hints:
        out.append("<h3>Hints</h3><ul>" + "".join(f"<li>{_code(n)}: {e(h)}</li>"
                                                  for n, h in hints) + "</ul>")
    if table_wide is not None and table_wide.get("co_missing"):
        pairs = "".join(f"<li>{_code(p['a'])} and {_code(p['b'])}: phi {p['phi']:.2f}</li>"
                        for p in table_wide["co_missing"])
        out.append(f"<h3>Often blank together</h3><ul>{pairs}</ul>")
    out.append(f"<div class='note'><strong>What these checks cannot say.</strong> "
               f"{e(CAUTION)}</div>")
    return "".join(out)


def _section_cautions(facts: _Facts) -> str:
    items = "".join(f"<li>{e(text)}</li>" for text in CAUTIONS)
    return f"<ol class='cautions'>{items}</ol>"


SECTIONS: tuple[tuple[str, str, Callable[[_Facts], str]], ...] = (
    ("overview", "Overview", _section_overview),
    ("holes", "Where the holes are", _section_holes),
    ("experiment", "The experiment", _section_experiment),
    ("filling", "What filling does", _section_filling),
    ("diagnostics", "Diagnostics", _section_diagnostics),
    ("cautions", "Cautions", _section_cautions),
)


# ------------------------------------------------------------------------------- the page

_CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"

_CSS = """
:root{--ink:#22262e;--muted:#585e6b;--paper:#f8f7f2;--sheet:#fff;--rule:#d5d7dc;
--accent:#0072B2;--warm:#D55E00;--mark:#E69F00}
*{box-sizing:border-box}
html{background:var(--paper);color:var(--ink)}
body{margin:0 auto;max-width:60rem;padding:2rem 1.5rem 4rem;
font:16px/1.55 "Iowan Old Style","Palatino Linotype",Palatino,"Book Antiqua",Georgia,serif}
h1,h2,h3,nav,table,dl,figcaption,.strip,.tag,.small,footer,.kicker{
font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
header.mast{border-top:7px solid var(--ink);border-bottom:1px solid var(--ink);
padding:.9rem 0 .8rem;margin-bottom:1.2rem}
.kicker{text-transform:uppercase;letter-spacing:.16em;font-size:.72rem;color:var(--muted)}
h1{font-size:2.05rem;line-height:1.15;margin:.25rem 0 .35rem}
h1 code{font-size:.85em}
.lede{margin:0;color:var(--muted)}
nav.toc{display:flex;flex-wrap:wrap;gap:.4rem 1.2rem;font-size:.86rem;margin:0 0 1.5rem;
padding:.55rem 0;border-bottom:1px solid var(--rule)}
nav.toc a{color:var(--ink);text-decoration:none;border-bottom:1px dotted var(--muted)}
section{margin-top:2.6rem}
h2{font-size:1.5rem;margin:0 0 1rem;display:flex;align-items:center;gap:.7rem;
padding-bottom:.4rem;border-bottom:2px solid var(--ink)}
h2 .no{display:inline-flex;align-items:center;justify-content:center;width:2.1rem;
height:2.1rem;border:2px solid var(--ink);border-radius:50%;font-size:1.05rem;
font-variant-numeric:tabular-nums;flex:none}
h3{font-size:1.08rem;margin:1.6rem 0 .5rem}
h3 .kind{font-weight:400;font-size:.8rem;color:var(--muted);border:1px solid var(--rule);
border-radius:3px;padding:0 .35rem;margin-left:.3rem;vertical-align:middle}
code{font-family:ui-monospace,"SF Mono",Menlo,Consolas,"DejaVu Sans Mono",monospace;
font-size:.88em;background:#ecebe4;padding:.05em .3em;border-radius:3px}
.strip{display:grid;grid-template-columns:repeat(auto-fit,minmax(8.5rem,1fr));gap:0;
border:1px solid var(--ink);background:var(--sheet);margin:1rem 0}
.stat{padding:.6rem .8rem;border-right:1px solid var(--rule);display:flex;flex-direction:column}
.stat:last-child{border-right:none}
.stat .big{font-size:1.45rem;font-weight:650;font-variant-numeric:tabular-nums}
.stat .small{color:var(--muted)}
.small{font-size:.82rem;color:var(--muted)}
table{border-collapse:collapse;width:100%;font-size:.84rem;margin:.5rem 0 1rem;
background:var(--sheet)}
table.narrow{width:auto;min-width:18rem}
th{text-align:left;font-weight:650;border-bottom:1.5px solid var(--ink);padding:.35rem .55rem}
td{border-bottom:1px solid var(--rule);padding:.3rem .55rem;vertical-align:top}
.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
.act{font-weight:600}
.act-drop{text-decoration:line-through;text-decoration-thickness:1.5px}
.act-exclude{font-style:italic;font-weight:400}
dl.settings{display:grid;grid-template-columns:minmax(10rem,16rem) 1fr;gap:.25rem 1rem;
font-size:.86rem;margin:.5rem 0 1rem}
dl.settings dt{color:var(--muted)}
dl.settings dd{margin:0}
figure.chart{margin:.8rem 0 1rem;padding:.8rem .8rem .5rem;background:var(--sheet);
border:1px solid var(--rule);border-left:4px solid var(--accent)}
figure.chart svg{display:block;width:100%;height:auto}
figcaption{font-size:.8rem;color:var(--muted);margin-top:.4rem}
article.column{margin:1.4rem 0 2rem;padding-top:.2rem;border-top:1px dashed var(--rule)}
.why{margin:.4rem 0 .6rem}
.tag{display:inline-block;font-size:.7rem;font-weight:650;text-transform:uppercase;
letter-spacing:.08em;border:1.5px solid var(--ink);border-radius:2px;padding:0 .35rem;
margin-right:.2rem;background:#fff3d6}
.note{border-left:4px solid var(--warm);background:var(--sheet);padding:.6rem .9rem;
margin:1rem 0}
.note ul{margin:.3rem 0 0}
ol.cautions li{margin:.45rem 0}
footer{margin-top:3rem;padding-top:.6rem;border-top:1px solid var(--ink);font-size:.78rem;
color:var(--muted)}
@media print{
html,body{background:#fff}
body{max-width:none;padding:0;font-size:10.5pt}
nav.toc{display:none}
section{break-before:page;margin-top:0}
section:first-of-type{break-before:auto}
figure,table,.strip,.note,dl{break-inside:avoid}
tr{break-inside:avoid}
h2,h3{break-after:avoid}
figure.chart{border-left-width:2px}
.strip{grid-template-columns:repeat(3,1fr)}
.stat{border-bottom:1px solid var(--rule)}
code{background:none;padding:0}
}
@page{size:A4;margin:14mm 13mm 16mm}
"""


def _reads_as_plan(options: SurveyOptions, plan: Plan) -> bool:
    """Whether ``options`` read the file as the plan's survey did (jobs and checks aside)."""
    def bare(o: SurveyOptions) -> SurveyOptions:
        return replace(o, n_jobs=1, diagnostics=True)

    return bare(options) == bare(survey_options_for(plan))


def _table_checks(table: Table, plan: Plan, survey: Survey | None,
                  options: SurveyOptions | None) -> tuple[Survey | None, dict[str, Any] | None]:
    """The survey to take column evidence from (None: the plan's) and the table-wide checks.

    A plan made by score stores its survey's table-wide checks (:attr:`Plan.survey`) and every
    column's evidence; they are used whenever they say what a new survey would (the survey
    that made the plan, or the same reading of the file with the checks asked for). Only
    then is the file surveyed again: for an older plan, or for other survey options.
    """
    stored = plan.survey
    options = options or survey_options_for(plan)
    if stored is not None and (survey is not None or (
            _reads_as_plan(options, plan) and (stored.get("checks") or not options.diagnostics))):
        wanted = survey is not None or options.diagnostics
        return None, stored if stored.get("checks") and wanted else None
    if survey is None:
        survey = survey_table(table, options)
    return survey, survey.evidence.table_dict() if survey.evidence is not None else None


def build_report(
    table: Table,
    plan: Plan,
    *,
    survey: Survey | None = None,
    survey_options: SurveyOptions | None = None,
    force: bool = False,
    progress: Callable[[int, int], None] | None = None,
) -> str:
    """The HTML report of a plan on the table it was made from.

    Parameters
    ----------
    table : Table
        The file the plan was made from (checked by its fingerprint, as ``fill`` does).
    plan : Plan
    survey : Survey, optional
        The survey behind the plan (``score`` has it), for a plan that does not store its
        checks. Without either, the file is surveyed again with ``survey_options``, by
        default :func:`survey_options_for` the plan.
    survey_options : SurveyOptions, optional
    force : bool
        Report on a file whose content differs from the plan's (``--force``).
    progress : callable, optional
        ``progress(done, total)`` after each step.

    Returns
    -------
    str
        The page: UTF-8 text, the same for the same inputs.
    """
    import imputelab.report.charts as charts  # matplotlib loads only when a report is made

    # The plan as written to plan.json (numbers rounded), so a report made by score and one
    # made later from the saved file are the same page.
    plan = Plan.from_dict(plan.to_dict())
    steps = 2 + len(SECTIONS)
    tick = progress or (lambda done, total: None)
    fill = FillReport()
    typed, _ = checked_clean(table, plan, fill, force=force)
    planned = [c for c in typed.columns if c in plan.columns]
    filled = fill_frame(typed[planned], plan, report=fill)
    tick(1, steps)
    survey, table_wide = _table_checks(table, plan, survey, survey_options)
    tick(2, steps)
    facts = _Facts(table=table, plan=plan, survey=survey, typed=typed[planned], filled=filled,
                   fill=fill, charts=charts, table_wide=table_wide)
    body = []
    for i, (anchor, title, make) in enumerate(SECTIONS, start=1):
        body.append(f'<section id="{anchor}"><h2><span class="no">{i}</span>'
                    f" {e(title)}</h2>{make(facts)}</section>")
        tick(2 + i, steps)
    toc = "".join(f'<a href="#{a}">{i}. {e(t)}</a>'
                  for i, (a, t, _) in enumerate(SECTIONS, start=1))
    name = table.path.name
    rows, cols = typed.shape
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>Imputation report: {e(name)}</title><style>{_CSS}</style></head><body>"
        '<header class="mast"><div class="kicker">imputelab &middot; imputation report</div>'
        f"<h1>{_code(name)}</h1><p class='lede'>{rows:,} rows &times; {cols:,} columns. "
        "What is blank, what each fill method scored against hidden truth, what the plan "
        "does, and what that changes. Filled values are estimates, not measurements.</p>"
        f'</header><nav class="toc" aria-label="Sections">{toc}</nav><main>'
        + "".join(body)
        + f"</main><footer>Made by imputelab {e(_version('imputelab'))} with the plan "
        f"{e(plan.source.get('fingerprint', ''))[:19]}&hellip; of {_code(name)}. "
        "Self-contained: no script, nothing fetched.</footer></body></html>\n"
    )


def write_report(path: str | Path, table: Table, plan: Plan, **options: Any) -> Path:
    """Build the report (see :func:`build_report`) and write it atomically to ``path``.

    Nothing is written when building fails, and an existing file is replaced only whole.
    """
    path = Path(path)
    page = build_report(table, plan, **options)
    with atomic_path(path) as tmp:
        tmp.write_text(page, encoding="utf-8")
    return path
