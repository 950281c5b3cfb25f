"""Options shared by several commands, and their translation to the core's settings."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Annotated

import typer

from imputelab.cli._common import parse_code, parse_pairs
from imputelab.errors import OptionError
from imputelab.survey.table import DEFAULT_DROP_THRESHOLD, SurveyOptions

FileArg = Annotated[Path, typer.Argument(help="A .csv or .parquet file.", show_default=False)]
KindOpt = Annotated[list[str] | None, typer.Option(
    "--kind", metavar="COLUMN=KIND",
    help="Set a column's kind: numeric, binary, categorical, datetime, text, identifier.")]
CodeOpt = Annotated[list[str] | None, typer.Option(
    "--missing-code", metavar="COLUMN=VALUE",
    help="Treat VALUE in COLUMN as a missing value (repeatable).")]
DateOpt = Annotated[list[str] | None, typer.Option(
    "--date-format", metavar="COLUMN=FORMAT", help="strptime format of a datetime column.")]
DropOpt = Annotated[float, typer.Option(
    "--drop-threshold", help="Flag columns missing more than this share for dropping.")]
TargetOpt = Annotated[str | None, typer.Option(
    "--target", metavar="COLUMN",
    help="The column a later model predicts: never imputed nor used to fill the others.")]
ChecksOpt = Annotated[bool, typer.Option(
    "--checks/--no-checks",
    help="Test what the blanks mean: Little's test, patterns, predictability, structural "
         "rules.")]
JobsOpt = Annotated[int, typer.Option("--jobs", "-j", help="Parallel tasks (0: all cores).")]
ClusterOpt = Annotated[str | None, typer.Option(
    "--cluster", metavar="ADDRESS|local:N",
    help="Run the work on Dask: the address of a running scheduler (tcp://host:8786), or "
         "local:N to start N worker processes on this machine. The cluster's workers then "
         "run it instead of the --jobs processes.")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print machine-readable JSON on stdout.")]
QuietOpt = Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")]


def survey_options(
    kind: list[str] | None,
    missing_code: list[str] | None,
    date_format: list[str] | None,
    drop_threshold: float = DEFAULT_DROP_THRESHOLD,
    target: str | None = None,
    *,
    checks: bool = True,
    jobs: int = 1,
    seed: int = 0,
) -> SurveyOptions:
    """Build the survey settings from the command-line options."""
    if jobs < 0:
        raise OptionError(f"--jobs must be 0 (all cores) or more, got {jobs}")
    codes: dict[str, list] = {}
    for name, value in parse_pairs(missing_code, "--missing-code"):
        codes.setdefault(name, []).append(parse_code(value))
    return SurveyOptions(
        kinds=dict(parse_pairs(kind, "--kind")),
        missing_codes=codes,
        date_formats=dict(parse_pairs(date_format, "--date-format")),
        drop_threshold=drop_threshold,
        target=target,
        diagnostics=checks,
        n_jobs=jobs or (os.cpu_count() or 1),
        seed=seed,
    )
