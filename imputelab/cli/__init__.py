"""The command line: a thin layer that parses options, calls the core and prints.

Exit codes: 0 done, 2 bad input or usage, 1 a bug.
"""

from __future__ import annotations

import typer

from imputelab.cli.bench import bench
from imputelab.cli.demo import demo
from imputelab.cli.fill import fill
from imputelab.cli.fit import fit
from imputelab.cli.report import report
from imputelab.cli.score import score
from imputelab.cli.survey import survey

__all__ = ["app", "main"]

app = typer.Typer(
    name="imputelab",
    help="Survey a table's holes, test imputation methods against hidden truth, write a "
         "per-column plan, and fill files the same way.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)
app.command()(survey)
app.command()(score)
app.command()(fill)
app.command()(fit)
app.command()(report)
app.command()(demo)
app.command()(bench)


def main() -> None:
    """Console-script entry point."""
    app()
