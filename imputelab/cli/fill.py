"""``imputelab fill FILE --plan plan.json --out OUT``."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table as RichTable

from imputelab.cli._common import check_output, err, handle_errors, out, print_json
from imputelab.cli._options import FileArg, JsonOpt, QuietOpt
from imputelab.fill import FillReport, fill_table
from imputelab.io import read_table, table_format, write_table
from imputelab.plan import Plan


def report_rich_table(report: FillReport) -> RichTable:
    """Cells filled per column."""
    table = RichTable(title="Cells filled", title_justify="left")
    table.add_column("column")
    table.add_column("method")
    table.add_column("filled", justify="right")
    for name, count in report.filled.items():
        table.add_row(name, report.methods.get(name, ""), str(count))
    return table


@handle_errors
def fill(
    file: FileArg,
    plan_path: Annotated[Path, typer.Option("--plan", "-p", help="A plan made by score.")],
    out_path: Annotated[Path, typer.Option("--out", "-o", help="Output .csv or .parquet.")],
    fit_on: Annotated[Path | None, typer.Option(
        "--fit-on", help="Fit the methods on this reference file instead of FILE.")] = None,
    force: Annotated[bool, typer.Option(
        "--force", help="Fill even when the plan was made from a different file.")] = False,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
) -> None:
    """Fill every hole of the plan's imputed columns and write the result."""
    out_format = table_format(out_path, option="--out")
    check_output(out_path, [file] + ([fit_on] if fit_on else []))
    plan = Plan.load(plan_path)
    table = read_table(file)
    reference = read_table(fit_on, option="--fit-on") if fit_on else None
    frame, report = fill_table(table, plan, fit_on=reference, force=force,
                               text_output=out_format == "csv")
    write_table(frame, out_path, delimiter=table.delimiter if out_format == "csv" else ",")
    if json:
        print_json({"out": str(out_path), **report.to_dict()})
        return
    if quiet:
        return
    for warning in report.warnings:
        err.print(f"warning: {warning}", markup=False, soft_wrap=True)
    out.print(report_rich_table(report))
    if report.dropped:
        out.print(f"Dropped: {', '.join(report.dropped)}")
    out.print(f"Wrote {out_path} ({len(frame)} rows, {frame.shape[1]} columns). Filled values "
              "are estimates, not measurements.")
