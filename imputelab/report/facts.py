"""What the report's sections draw on: the gathered facts, the HTML helpers, the survey settings.

:class:`Facts` holds the file as the plan reads it, the plan, the fill and the survey's checks;
:func:`table_checks` takes the checks from the plan when it stores them and surveys the file
again otherwise; :func:`survey_options_for` reads a file as the plan did.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field, replace
from importlib.metadata import PackageNotFoundError, version
from typing import Any

import pandas as pd

from imputelab.fill.frame import FillReport
from imputelab.io.tables import Table
from imputelab.score.plan import Plan
from imputelab.survey.table import DEFAULT_DROP_THRESHOLD, Survey, SurveyOptions, survey_table

__all__ = ["Facts", "code", "e", "html_table", "num", "package_version", "pct",
           "survey_options_for", "table_checks"]


def e(value: Any) -> str:
    """Escape text from the file or the plan for HTML."""
    return html.escape(str(value), quote=True)


def package_version(package: str) -> str:
    """The installed version of ``package``, or "not installed"."""
    try:
        return version(package)
    except PackageNotFoundError:
        return "not installed"


@dataclass
class Facts:
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
        Options given by the caller (``kinds``, ``missing_codes``, ...); a column named
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
        executor=given.executor,
    )


def _reads_as_plan(options: SurveyOptions, plan: Plan) -> bool:
    """Whether ``options`` read the file as the plan's survey did (jobs and checks aside)."""
    def bare(o: SurveyOptions) -> SurveyOptions:
        return replace(o, n_jobs=1, diagnostics=True)

    return bare(options) == bare(survey_options_for(plan))


def table_checks(table: Table, plan: Plan, survey: Survey | None,
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


def html_table(head: list[str], rows: list[list[str]], *,
               numeric: set[int] | frozenset = frozenset(), cls: str = "") -> str:
    """An HTML table from cells that are already HTML (escape before calling)."""
    ths = "".join(f'<th{" class=num" if i in numeric else ""}>{h}</th>'
                  for i, h in enumerate(head))
    body = "".join(
        "<tr>" + "".join(f'<td{" class=num" if i in numeric else ""}>{c}</td>'
                         for i, c in enumerate(row)) + "</tr>" for row in rows)
    return f'<table class="{cls}"><thead><tr>{ths}</tr></thead><tbody>{body}</tbody></table>'


def code(name: Any) -> str:
    return f"<code>{e(name)}</code>"


def pct(value: float) -> str:
    return f"{value:.1%}" if value < 0.995 or value == 1 else f"{value:.2%}"


def num(value: Any, digits: int = 4) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    value = float(value)
    if 10 ** digits <= abs(value) < 1e15:  # whole thousands read better than 1.2e+04
        return f"{value:,.0f}"
    return f"{value:.{digits}g}"
