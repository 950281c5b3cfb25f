"""Section 4 of the report: what filling does to each column's values."""

from __future__ import annotations

import numpy as np
import pandas as pd

from imputelab.io.columns import INDICATOR_SUFFIX
from imputelab.report.facts import Facts, code, e, html_table, num

__all__ = ["section_filling"]

#: Labels shown per categorical column (the rest are summed into one bar).
TOP_LABELS = 12

def _summary_row(label: str, values: pd.Series, dates: bool) -> list[str]:
    if not len(values):
        return [label, "0", "", "", "", ""]
    if dates:
        stamp = pd.to_datetime(values)
        show = [str(stamp.mean().round("min")), str(stamp.std().round("min")),
                str(stamp.min()), str(stamp.max())]
    else:
        number = values.astype(float)
        show = [num(number.mean()), num(number.std(ddof=1) if len(number) > 1 else None),
                num(number.min()), num(number.max())]
    return [label, f"{len(values):,}", *[e(s) for s in show]]


def _counts(values: pd.Series, top: list[str]) -> dict[str, int]:
    text = values.dropna().astype("str")
    counts = text.value_counts()
    out = {label: int(counts.get(label, 0)) for label in top}
    rest = int(counts.drop(labels=[t for t in top if t in counts.index]).sum())
    if rest:
        out["(other labels)"] = rest
    return out


def section_filling(facts: Facts) -> str:
    plan, charts = facts.plan, facts.charts
    total = sum(facts.fill.filled.values())
    out = [f"<p>The plan was applied to {code(facts.table.path.name)} in memory, exactly as "
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
        out.append(f'<article class="column"><h3>{code(name)} <span class="kind">'
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
            out.append(html_table(["values", "count", "mean", "SD", "min", "max"],
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
            out.append(f"<p class='small'>The fill adds {code(name + INDICATOR_SUFFIX)} "
                       "(1 where the value was filled) so later analysis can tell the rows "
                       "apart.</p>")
        out.append("</article>")
    if empty:
        out.append("<p>No blanks to fill in this file: "
                   + ", ".join(code(n) for n in empty) + ".</p>")
    if not facts.fill.filled:
        out.append("<p>The plan fills no column.</p>")
    return "".join(out)
