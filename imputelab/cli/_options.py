"""Options shared by several commands, and their translation to the core's settings."""

from __future__ import annotations

import functools
import inspect
import os
from collections.abc import Callable
from pathlib import Path
from typing import Annotated, Any, TypeVar

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


#: The options that say how a file is read, shared by every command that surveys one: the
#: parameter, its typer annotation and its default.
READING: dict[str, tuple[Any, Any]] = {
    "kind": (KindOpt, None),
    "missing_code": (CodeOpt, None),
    "date_format": (DateOpt, None),
    "drop_threshold": (DropOpt, DEFAULT_DROP_THRESHOLD),
    "target": (TargetOpt, None),
    "checks": (ChecksOpt, True),
    "jobs": (JobsOpt, 0),
}

C = TypeVar("C", bound=Callable[..., Any])


def reading_options(command: C) -> C:
    """Give ``command`` the options of :data:`READING` that it does not declare itself.

    The command ends its parameters with ``**reading``; typer sees the shared options as
    ordinary keyword parameters (through ``__signature__``), and the command receives them in
    ``reading``, ready for :func:`survey_options`. A command that needs another default or
    help for one of them declares it itself, and keeps it out of ``reading``.
    """
    own = inspect.signature(command, eval_str=True)
    params = [p for p in own.parameters.values() if p.kind is not p.VAR_KEYWORD]
    declared = {p.name for p in params}
    shared = [inspect.Parameter(name, inspect.Parameter.POSITIONAL_OR_KEYWORD, annotation=hint,
                                default=default)
              for name, (hint, default) in READING.items() if name not in declared]
    at = next((i for i, p in enumerate(params) if p.name in ("jobs", "json")), len(params))
    params[at:at] = shared  # in --help, before the output options

    @functools.wraps(command)
    def wrapper(**kwargs: Any) -> Any:
        return command(**kwargs)

    wrapper.__signature__ = own.replace(parameters=params)  # type: ignore[attr-defined]
    wrapper.__annotations__ = {p.name: p.annotation for p in params}
    return wrapper  # type: ignore[return-value]


def survey_options(
    kind: list[str] | None = None,
    missing_code: list[str] | None = None,
    date_format: list[str] | None = None,
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
