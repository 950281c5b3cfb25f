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

Sections, in order (:data:`SECTIONS`); each is one ``section_*`` function taking the
gathered :class:`~imputelab.report.facts.Facts` and returning HTML, in
:mod:`~imputelab.report.overview`, :mod:`~imputelab.report.experiment`,
:mod:`~imputelab.report.filling` and :mod:`~imputelab.report.diagnostics`; the style sheet is in
:mod:`~imputelab.report.style`. To add one, write the function and add it to :data:`SECTIONS`.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

from imputelab.fill.frame import FillReport, checked_clean, fill_frame
from imputelab.io.tables import Table, atomic_path
from imputelab.report.diagnostics import section_cautions, section_diagnostics
from imputelab.report.experiment import section_experiment
from imputelab.report.facts import Facts, code, e, package_version, survey_options_for, table_checks
from imputelab.report.filling import section_filling
from imputelab.report.overview import MAP_ROWS, section_holes, section_overview
from imputelab.report.style import CSP, CSS
from imputelab.score.plan import Plan
from imputelab.survey.table import Survey, SurveyOptions

__all__ = ["MAP_ROWS", "SECTIONS", "build_report", "survey_options_for", "write_report"]


SECTIONS: tuple[tuple[str, str, Callable[[Facts], str]], ...] = (
    ("overview", "Overview", section_overview),
    ("holes", "Where the holes are", section_holes),
    ("experiment", "The experiment", section_experiment),
    ("filling", "What filling does", section_filling),
    ("diagnostics", "Diagnostics", section_diagnostics),
    ("cautions", "Cautions", section_cautions),
)



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
        Report on a file whose content differs from the plan's.
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
    survey, table_wide = table_checks(table, plan, survey, survey_options)
    tick(2, steps)
    facts = Facts(table=table, plan=plan, survey=survey, typed=typed[planned], filled=filled,
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
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>Imputation report: {e(name)}</title><style>{CSS}</style></head><body>"
        '<header class="mast"><div class="kicker">imputelab &middot; imputation report</div>'
        f"<h1>{code(name)}</h1><p class='lede'>{rows:,} rows &times; {cols:,} columns. "
        "What is blank, what each fill method scored against hidden truth, what the plan "
        "does, and what that changes. Filled values are estimates, not measurements.</p>"
        f'</header><nav class="toc" aria-label="Sections">{toc}</nav><main>'
        + "".join(body)
        + f"</main><footer>Made by imputelab {e(package_version('imputelab'))} with the plan "
        f"{e(plan.source.get('fingerprint', ''))[:19]}&hellip; of {code(name)}. "
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
