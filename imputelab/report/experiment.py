"""Section 3 of the report: the experiment, column by column, and the models of the target."""

from __future__ import annotations

from typing import Any

from imputelab.errors import OptionError
from imputelab.metrics.scores import get_metric
from imputelab.report.facts import Facts, code, e, html_table, num, pct
from imputelab.score.plan import Plan

__all__ = ["section_experiment"]


def _greater_is_better(metric: str) -> bool:
    try:
        return get_metric(metric).greater_is_better
    except OptionError:  # distribution and balanced: combined scores, lower is better
        return False


def section_experiment(facts: Facts) -> str:
    plan, settings = facts.plan, facts.plan.settings
    masks = list(settings.get("masks", []))
    # Plans written before the choice rules had names used the unpaired one-SE rule.
    one_se_bound = settings.get("choice_rule", "unpaired") == "unpaired"
    out = [f"<p>For every column to fill, known cells were hidden ({e(', '.join(masks))}; "
           f"{pct(float(settings.get('rate', 0)))} of the observed cells per draw, "
           f"{e(settings.get('repeats', ''))} draw(s) per mask), filled by every candidate "
           "method, and compared with the values that had been hidden. These are the "
           "<strong>selection scores</strong>, the ones the choice was made on: the bars are "
           "the mean score over every draw, the error bars one standard error of that mean, "
           "the markers the mean under each mask"
           + (", the dotted line one standard error from the best mean" if one_se_bound
              else "") + ". Rule: "
           f"{e(settings.get('choice', ''))}.</p>"]
    scored = [n for n, c in plan.columns.items() if c.scores and c.action == "impute"]
    for name in scored:
        out.append(_column_article(facts, name, one_se_bound))
    unscored = [n for n, c in plan.columns.items()
                if c.action == "impute" and n not in scored]
    if unscored:
        items = "".join(f"<li>{code(n)}: <strong>{e(plan.columns[n].method)}</strong>: "
                        f"{e(plan.columns[n].reason)}</li>" for n in unscored)
        out.append(f"<h3>Columns filled without a contest</h3><ul>{items}</ul>")
    if not scored:
        out.append("<p>No column was scored: the experiment had nothing to test.</p>")
    out.append(_downstream(plan))
    return "".join(out)


def _column_article(facts: Facts, name: str, one_se_bound: bool) -> str:
    """One scored column: its selection scores as a chart and a table, the reason, the
    expected error of the chosen method when the plan has it."""
    plan = facts.plan
    col = plan.columns[name]
    metric = plan.ranking_metric(col.kind)
    entries = {m: s for m, s in col.scores.items() if s.get(metric) is not None}
    if not entries:
        return ""
    structural = col.reason.startswith("structural blank")
    chosen = col.method if col.method in entries and not structural else None
    means = {m: s[metric] for m, s in entries.items()}
    errors = {m: s.get(f"{metric}_se") for m, s in entries.items()}
    by_mask = {m: {k.split("@", 1)[1]: v for k, v in s.items()
                   if k.startswith(f"{metric}@") and v is not None}
               for m, s in entries.items()}
    greater = _greater_is_better(metric)
    fig = facts.charts.method_scores(means, errors, column=name, metric=metric,
                                     greater_is_better=greater, chosen=chosen, by_mask=by_mask,
                                     bound=one_se_bound)
    best = (max if greater else min)(means, key=means.get)
    alt = (f"{name}: selection scores ({metric}) of {len(means)} methods; best mean {best} "
           f"({means[best]:.3g}); chosen {col.method}.")
    out = [f'<article class="column"><h3>{code(name)} <span class="kind">'
           f"{e(col.kind)}</span></h3>"]
    out.append(facts.chart(fig, alt=alt, caption=(
        f"Selection scores: {metric} of every method on {name} "
        f"({'higher' if greater else 'lower'} is better). "
        + (f"Chosen: {col.method} (hatched, labelled)." if chosen else
           f"Filled by its structural rule with {col.method}, not by the experiment's "
           "ranking."))))
    label = "chosen by the rule" if chosen else "filled by its structural rule"
    out.append(f"<p class='why'><span class='tag'>{e(label)}</span> "
               f"<strong>{e(col.method)}</strong>: {e(col.reason)}</p>")
    out.append(_expected_error(col))
    cells = []
    for method, s in entries.items():
        per_mask = "; ".join(f"{k}: {num(v, 3)}" for k, v in by_mask[method].items())
        mark = " <span class='tag'>chosen</span>" if method == chosen else ""
        cells.append([e(method) + mark, num(s[metric]), num(s.get(f"{metric}_se"), 2),
                      e(per_mask), e(s.get("draws", ""))])
    out.append(html_table(["method", f"selection score: mean {e(metric)}", "SE",
                           "mean per mask", "draws"], cells, numeric={1, 2, 4}))
    if col.skipped:
        items = "".join(f"<li>{e(m)}: {e(why)}</li>" for m, why in col.skipped.items())
        out.append(f"<p class='small'>Methods that could not fill it:</p><ul>{items}</ul>")
    out.append("</article>")
    return "".join(out)


def _expected_error(col: Any) -> str:
    """The chosen method's error on held-out hidden cells, when the plan records it."""
    found = getattr(col, "expected_error", None)  # absent from plans made before it
    if not isinstance(found, dict) or found.get("score") is None:
        return ""
    se, draws = found.get("se"), found.get("draws")
    spread = f" &plusmn; {num(se, 2)} (SE)" if se is not None else ""
    over = f", over {e(draws)} draw(s)" if draws else ""
    return (f"<p class='expected'><span class='tag'>expected error (held-out cells)</span> "
            f"{e(found.get('metric', ''))} {num(found['score'])}{spread}{over}: the error of "
            f"{e(col.method)} on hidden cells that no choice was made with. The selection "
            "scores above are those the choice was made on, and tend to flatter the method "
            "that won it.</p>")


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
    return (f"<h3>Models of the target {code(target)} after each fill</h3>"
            f"<p>{e(down.get('metric', ''))} (higher is better), mean ± standard error over "
            f"{e(down.get('n_splits', ''))} folds. The target only scores the models here; it "
            "never fills a feature.</p>" + html_table(["fill", *models], rows, numeric={1, 2}))
