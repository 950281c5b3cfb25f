"""Sections 5 and 6 of the report: what the blanks mean, and the cautions."""

from __future__ import annotations

from imputelab.report.facts import Facts, code, e, html_table, pct
from imputelab.survey.diagnostics import CAUTION

__all__ = ["CAUTIONS", "section_cautions", "section_diagnostics"]

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


def section_diagnostics(facts: Facts) -> str:
    charts, plan = facts.charts, facts.plan
    table_wide = facts.table_wide
    out = []
    out.append("<h3>Little's MCAR test</h3>")
    if table_wide is None:
        out.append("<p>Not run: the survey's checks were switched off.</p>")
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
        rows.append([code(name), e(check.get("verdict", "")), interval,
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
        out.append(html_table(["column", "verdict", "AUC (95% interval)", "drivers", "blanks"],
                          rows, numeric={4}))
    else:
        out.append("<p>Not available: no column's blanks were checked.</p>")
    rules = []
    for name in plan.columns:
        for rule in (facts.evidence(name) or {}).get("structural") or []:
            rules.append([code(name), e(rule["when"]), f"{rule['support']:,}",
                          pct(float(rule["confidence"])), f"{rule['unexplained']:,}"])
    out.append("<h3>Structural blanks</h3>")
    if rules:
        out.append("<p>Rules under which a blank means 'does not apply' rather than "
                   "'unknown'; such a column is filled with a constant that says so.</p>")
        out.append(html_table(["column", "blank when", "rows", "of them blank",
                           "blanks outside the rule"], rows=rules, numeric={2, 3, 4}))
    else:
        out.append("<p>No rule found that explains a column's blanks by another column.</p>")
    hints = [(n, h) for n in plan.columns for h in (facts.evidence(n) or {}).get("hints", [])]
    if hints:
        out.append("<h3>Hints</h3><ul>" + "".join(f"<li>{code(n)}: {e(h)}</li>"
                                                  for n, h in hints) + "</ul>")
    if table_wide is not None and table_wide.get("co_missing"):
        pairs = "".join(f"<li>{code(p['a'])} and {code(p['b'])}: phi {p['phi']:.2f}</li>"
                        for p in table_wide["co_missing"])
        out.append(f"<h3>Often blank together</h3><ul>{pairs}</ul>")
    out.append(f"<div class='note'><strong>What these checks cannot say.</strong> "
               f"{e(CAUTION)}</div>")
    return "".join(out)


def section_cautions(facts: Facts) -> str:
    items = "".join(f"<li>{e(text)}</li>" for text in CAUTIONS)
    return f"<ol class='cautions'>{items}</ol>"
