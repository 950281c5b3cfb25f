"""``imputelab survey FILE``."""

from __future__ import annotations

from dataclasses import replace
from typing import Any

from rich.table import Table as RichTable

from imputelab.cli._common import handle_errors, out, print_json, progress_bar
from imputelab.cli._flags import as_flags
from imputelab.cli._options import (
    ClusterOpt,
    FileArg,
    JsonOpt,
    QuietOpt,
    reading_options,
    survey_options,
)
from imputelab.executors.pool import open_executor
from imputelab.io.tables import read_table
from imputelab.survey.diagnostics import CAUTION
from imputelab.survey.table import Survey, survey_table


def survey_rich_table(survey: Survey) -> RichTable:
    """The per-column survey as a terminal table."""
    table = RichTable(title=f"{survey.table.path.name}: {survey.rows} rows, "
                            f"{len(survey.columns)} columns", title_justify="left")
    table.add_column("column", no_wrap=True)
    table.add_column("kind")
    table.add_column("missing", justify="right")
    table.add_column("%", justify="right")
    table.add_column("read as missing", overflow="fold", ratio=2)
    table.add_column("drop")
    table.add_column("blanks predicted? (AUC)", overflow="fold", ratio=2)
    table.add_column("notes", overflow="fold", ratio=3)
    for name, col in survey.columns.items():
        tokens = [f"'{t}' x{c}" for t, c in col.spec.tokens.items()]
        tokens += [f"code {_plain(c)}" for c in col.spec.missing_codes]
        table.add_row(name, col.spec.kind, str(col.missing), f"{col.missing_fraction:.1%}",
                      ", ".join(tokens), "DROP" if col.drop else "",
                      _predictability(col.evidence.get("missingness")),
                      as_flags("; ".join(col.notes)))
    return table


SHORT_VERDICT = {
    "depends on observed columns (MAR evidence)": "yes",
    "no detectable dependence on observed columns": "no",
    "cannot tell (too few missing)": "too few to tell",
}


def _plain(value: object) -> object:
    return int(value) if isinstance(value, float) and value.is_integer() else value


def _predictability(check: dict | None) -> str:
    if not check:
        return ""
    word = SHORT_VERDICT.get(check["verdict"], check["verdict"])
    if check.get("auc") is None:
        return word
    drivers = f": {', '.join(check['drivers'])}" if check["drivers"] else ""
    return f"{word} ({check['auc']:.2f}){drivers}"


def evidence_lines(survey: Survey, shown: int = 6) -> list[str]:
    """Little's test, the commonest patterns and the co-missing pairs, as text lines."""
    if survey.evidence is None:
        return []
    ev = survey.evidence
    test = ev.mcar_test
    if test.testable:
        lines = [f"Little's MCAR test on {len(test.columns)} numeric columns: d² = "
                 f"{test.statistic:.1f}, df = {test.df}, p = {test.p_value:.3g}, "
                 f"{test.patterns} patterns. {test.note}"]
    else:
        lines = [f"Little's MCAR test: not testable. {test.note}"]
    patterns = ev.patterns
    lines.append(f"Patterns of blanks: {patterns.n_patterns} distinct; complete rows "
                 f"{patterns.complete_rows} of {patterns.n_rows}. Most common:")
    for names, count in patterns.patterns[:shown]:
        lines.append(f"  {count:>7}  {', '.join(names) if names else '(complete)'}")
    if ev.co_missing:
        pairs = ", ".join(f"{p['a']} & {p['b']} (phi {p['phi']:.2f})" for p in ev.co_missing)
        lines.append(f"Often blank together: {pairs}")
    lines.append(f"Caution: {CAUTION}")
    return lines


@handle_errors
@reading_options
def survey(
    file: FileArg,
    cluster: ClusterOpt = None,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
    **reading: Any,
) -> None:
    """Survey a table: kinds, missing cells, disguised blanks, codes, what the blanks mean."""
    options = survey_options(**reading)
    drop_threshold, target = options.drop_threshold, options.target
    table = read_table(file)
    with open_executor(reading["jobs"], cluster) as executor, \
            progress_bar("surveying", quiet=quiet or json):  # the checks fit classifiers
        result = survey_table(table, replace(options, executor=executor))
    if json:
        print_json(result.to_dict())
    elif not quiet:
        out.print(survey_rich_table(result))
        for line in evidence_lines(result):
            out.print(line, highlight=False)
        flagged = [n for n, c in result.columns.items() if c.drop]
        if flagged:
            out.print(f"Flagged for dropping (over {drop_threshold:.0%} missing): "
                      f"{', '.join(flagged)}")
        if target is not None:
            out.print(f"Rows with the target '{target}' missing: "
                      f"{int(result.typed[target].isna().sum())}")
