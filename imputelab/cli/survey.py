"""``imputelab survey FILE``."""

from __future__ import annotations

from rich.table import Table as RichTable

from imputelab.cli._common import handle_errors, out, print_json
from imputelab.cli._options import (
    CodeOpt,
    DateOpt,
    DropOpt,
    FileArg,
    JsonOpt,
    KindOpt,
    QuietOpt,
    TargetOpt,
    survey_options,
)
from imputelab.io import read_table
from imputelab.survey import DEFAULT_DROP_THRESHOLD, Survey, survey_table


def survey_rich_table(survey: Survey) -> RichTable:
    """The per-column survey as a terminal table."""
    table = RichTable(title=f"{survey.table.path.name}: {survey.rows} rows, "
                            f"{len(survey.columns)} columns", title_justify="left")
    table.add_column("column", no_wrap=True)
    table.add_column("kind")
    table.add_column("missing", justify="right")
    table.add_column("missing %", justify="right")
    table.add_column("tokens read as missing", overflow="fold", ratio=1)
    table.add_column("codes?")
    table.add_column("drop")
    table.add_column("notes", overflow="fold", ratio=2)
    for name, col in survey.columns.items():
        tokens = ", ".join(f"'{t}' x{c}" for t, c in col.spec.tokens.items())
        codes = ", ".join(f"{c:g}" for c in col.suspected_codes)
        table.add_row(name, col.spec.kind, str(col.missing), f"{col.missing_fraction:.1%}",
                      tokens, codes, "DROP" if col.drop else "", "; ".join(col.notes))
    return table


@handle_errors
def survey(
    file: FileArg,
    kind: KindOpt = None,
    missing_code: CodeOpt = None,
    date_format: DateOpt = None,
    drop_threshold: DropOpt = DEFAULT_DROP_THRESHOLD,
    target: TargetOpt = None,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
) -> None:
    """Survey a table: each column's kind, missing cells, disguised blanks and codes."""
    options = survey_options(kind, missing_code, date_format, drop_threshold, target)
    result = survey_table(read_table(file), options)
    if json:
        print_json(result.to_dict())
    elif not quiet:
        out.print(survey_rich_table(result))
        flagged = [n for n, c in result.columns.items() if c.drop]
        if flagged:
            out.print(f"Flagged for dropping (over {drop_threshold:.0%} missing): "
                      f"{', '.join(flagged)}")
        if target is not None:
            out.print(f"Rows with the target '{target}' missing: "
                      f"{int(result.typed[target].isna().sum())}")
