"""``imputelab report FILE --plan plan.json --out report.html``."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any

import typer

from imputelab.cli._common import check_output, handle_errors, out, print_json, progress_bar
from imputelab.cli._options import FileArg, JsonOpt, QuietOpt, reading_options, survey_options
from imputelab.io.tables import read_table
from imputelab.report.page import SECTIONS, survey_options_for, write_report
from imputelab.score.plan import Plan


def report_summary(path: Path) -> dict[str, object]:
    """What was written: the path, its size, the sections and the number of charts."""
    page = path.read_text(encoding="utf-8")
    return {"out": str(path), "bytes": path.stat().st_size,
            "sections": [title for _, title, _ in SECTIONS], "charts": page.count("<svg")}


def report_line(path: Path) -> str:
    """One closing line for the terminal."""
    info = report_summary(path)
    return (f"Report written to {path} ({info['bytes'] / 1024:.0f} KB, {info['charts']} "
            "charts, self-contained). Filled values are estimates, not measurements.")


@handle_errors
@reading_options
def report(
    file: FileArg,
    plan_path: Annotated[Path, typer.Option("--plan", "-p", help="A plan made by score.")],
    out_path: Annotated[Path, typer.Option("--out", "-o", help="Where to write the .html.")],
    force: Annotated[bool, typer.Option(
        "--force", help="Report even when the plan was made from a different file.")] = False,
    drop_threshold: Annotated[float | None, typer.Option(
        "--drop-threshold", help="Flag columns missing more than this share (default: the "
                                 "plan's).")] = None,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
    **reading: Any,
) -> None:
    """Write a self-contained HTML report of a plan on its file, with charts.

    The file is read as the plan says (its kinds, codes and date formats); the survey options
    change how the survey in the report's diagnostics reads it.
    """
    check_output(out_path, [file, plan_path])
    given = survey_options(**reading)
    plan = Plan.load(plan_path)
    table = read_table(file)
    options = survey_options_for(plan, given, drop_threshold=drop_threshold)
    with progress_bar("writing the report", quiet=quiet or json) as update:
        write_report(out_path, table, plan, survey_options=options, force=force,
                     progress=update)
    if json:
        print_json(report_summary(out_path))
    elif not quiet:
        out.print(report_line(out_path), markup=False, soft_wrap=True)
