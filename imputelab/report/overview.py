"""Sections 1 and 2 of the report: the overview, and where the holes are."""

from __future__ import annotations

import platform

import numpy as np

from imputelab.executors.seeds import derive_seed
from imputelab.report.facts import Facts, code, e, html_table, package_version, pct
from imputelab.survey.diagnostics import missing_patterns
from imputelab.survey.table import DEFAULT_DROP_THRESHOLD

__all__ = ["MAP_ROWS", "section_holes", "section_overview"]

#: Rows drawn in the map of blank cells; a larger table is shown by a uniform sample.
MAP_ROWS = 1000
#: Rows of the pattern table.
PATTERNS_SHOWN = 12
#: Packages whose versions the overview lists.
VERSIONS = ("imputelab", "numpy", "pandas", "scipy", "scikit-learn", "lightgbm", "pyarrow",
            "matplotlib")

def section_overview(facts: Facts) -> str:
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
            (f"{rows:,}", "rows"), (f"{cols:,}", "columns"), (pct(overall), "of cells blank"),
            (f"{len(actions['impute'])}", "columns to fill"),
            (f"{filled:,}", "cells filled"), (f"{len(actions['drop'])}", "columns dropped")))
    out = [
        f"<p>This report shows how imputelab read {code(facts.table.path.name)}, where its "
        "cells are blank, how every fill method did when known cells were hidden and filled "
        "again, which method each column gets and why, and what filling does to the values. "
        "<strong>Filled values are estimates, not measurements.</strong></p>",
        f'<div class="strip">{strip}</div>',
        "<h3>The plan at a glance</h3>",
    ]
    body = []
    for name, col in plan.columns.items():
        method = e(col.method or "") + (" + indicator" if col.indicator else "")
        body.append([code(name), e(col.kind), pct(col.missing_fraction),
                     f'<span class="act act-{e(col.action)}">{e(col.action)}</span>',
                     method or "&mdash;"])
    out.append(html_table(["column", "kind", "blank", "action", "method"], body, numeric={2}))
    for action, title in (("drop", "Columns dropped, and why"),
                          ("exclude", "Columns passed through unchanged, and why")):
        if actions[action]:
            items = "".join(f"<li>{code(n)}: {e(plan.columns[n].reason)}</li>"
                            for n in actions[action])
            out.append(f"<h3>{title}</h3><ul>{items}</ul>")
    if not actions["drop"]:
        threshold = settings.get("drop_threshold", DEFAULT_DROP_THRESHOLD)
        out.append(f"<p>No column is dropped: none is blank in more than "
                   f"{pct(float(threshold))} of its cells.</p>")
    masks = ", ".join(settings.get("masks", [])) or "none"
    experiment = [
        ("masks (how known cells were hidden)", e(masks)),
        ("share of observed cells hidden per draw", pct(float(settings.get("rate", 0)))),
        ("repeats per mask", e(settings.get("repeats", ""))),
        ("seed", e(settings.get("seed", ""))),
        ("candidate methods", e(", ".join(settings.get("methods", [])))),
        ("primary metrics", e(", ".join(f"{k}: {v}" for k, v in
                                         (settings.get("metrics") or {}).items()))),
        ("choice rule", e(settings.get("choice", ""))),
        ("rows used by the experiment", f"{settings.get('experiment_rows', rows):,} of "
                                        f"{plan.source.get('rows', rows):,}"),
        ("drop threshold", pct(float(settings.get("drop_threshold", DEFAULT_DROP_THRESHOLD)))),
        ("target", code(settings["target"]) if settings.get("target") else "none"),
    ]
    out.append("<h3>Experiment settings</h3><dl class='settings'>" + "".join(
        f"<dt>{k}</dt><dd>{v}</dd>" for k, v in experiment) + "</dl>")
    versions = [["Python", e(platform.python_version())]] + [
        [e(p), e(package_version(p))] for p in VERSIONS]
    out.append("<h3>Software</h3>" + html_table(["package", "version"], versions, cls="narrow"))
    out.append(f"<p class='small'>The plan was made by imputelab "
               f"{e(settings.get('imputelab_version', 'unknown'))} from "
               f"{code(plan.source.get('file', ''))} "
               f"({e(plan.source.get('fingerprint', 'no fingerprint'))}).</p>")
    if facts.fill.warnings:
        items = "".join(f"<li>{e(w)}</li>" for w in facts.fill.warnings)
        out.append(f"<div class='note'><strong>Notes from the fill</strong><ul>{items}</ul></div>")
    return "".join(out)


def section_holes(facts: Facts) -> str:
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
    rows = [[f"{count:,}", pct(count / n if n else 0.0),
             ", ".join(code(c) for c in names) if names else "<em>none: complete row</em>"]
            for names, count in patterns.patterns]
    rest = (f" {patterns.truncated} rarer patterns are not listed." if patterns.truncated
            else "")
    out.append(f"<h3>Patterns of blanks</h3><p>{patterns.n_patterns} distinct patterns; "
               f"{patterns.complete_rows:,} of {n:,} rows have no blank cell.{e(rest)}</p>")
    out.append(html_table(["rows", "share", "blank columns"], rows, numeric={0, 1}))
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
