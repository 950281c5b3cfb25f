"""Shared pieces of the command line: consoles, the error wrapper, option parsing."""

from __future__ import annotations

import functools
import json
import os
import sys
from collections.abc import Callable, Iterable
from contextlib import contextmanager
from pathlib import Path
from typing import Any, TypeVar

import typer
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

from imputelab.cli._flags import EXIT_BUG, EXIT_INTERRUPTED, EXIT_USAGE, as_flags
from imputelab.errors import ImputelabError, OptionError

F = TypeVar("F", bound=Callable[..., Any])

# A pipe or a log gets 120 columns rather than rich's 80, so tables stay readable.
# No console markup: file-derived text ("[experiment: ...]" in a reason, a column named
# "[b]x") would otherwise be read as style tags and vanish.
out = Console(highlight=False, soft_wrap=False, markup=False)
if not out.is_terminal and "COLUMNS" not in os.environ:
    out = Console(highlight=False, soft_wrap=False, width=120, markup=False)
err = Console(stderr=True, highlight=False, markup=False)


def fail(message: str) -> None:
    """One line on stderr (core parameters shown as their flags), exit code 2."""
    err.print(f"imputelab: error: {as_flags(message)}", markup=False, soft_wrap=True)
    raise typer.Exit(code=EXIT_USAGE)


def warn(message: str) -> None:
    """A warning line on stderr (core parameters shown as their flags)."""
    err.print(f"warning: {as_flags(message)}", markup=False, soft_wrap=True)


def handle_errors(func: F) -> F:
    """Turn the core's errors into one line on stderr and exit code 2.

    Anything else is a bug: it shows a traceback only when IMPUTELAB_DEBUG is set, otherwise a
    one-line note and exit code 1.
    """

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except ImputelabError as exc:
            fail(str(exc))
        except KeyboardInterrupt:
            err.print("imputelab: interrupted")
            raise typer.Exit(code=EXIT_INTERRUPTED) from None
        except typer.Exit:
            raise
        except Exception as exc:
            if os.environ.get("IMPUTELAB_DEBUG"):
                raise
            err.print(
                f"imputelab: internal error: {type(exc).__name__}: {exc} (this is a bug; run "
                "again with IMPUTELAB_DEBUG=1 for the traceback and report it)",
                markup=False, soft_wrap=True,
            )
            raise typer.Exit(code=EXIT_BUG) from None

    return wrapper  # type: ignore[return-value]


def parse_pairs(values: Iterable[str] | None, option: str) -> list[tuple[str, str]]:
    """Parse repeated ``COLUMN=VALUE`` options (the last ``=`` splits, so names may hold one)."""
    pairs = []
    for item in values or ():
        if "=" not in item:
            raise OptionError(f"{option} '{item}': expected COLUMN=VALUE")
        name, _, value = item.rpartition("=")
        if not name or value == "":
            raise OptionError(f"{option} '{item}': expected COLUMN=VALUE")
        pairs.append((name, value))
    return pairs


def parse_list(value: str | None, option: str) -> list[str] | None:
    """Parse a comma-separated list option."""
    if value is None:
        return None
    items = [v.strip() for v in value.split(",") if v.strip()]
    if not items:
        raise OptionError(f"{option}: give at least one name")
    return items


def parse_code(value: str) -> Any:
    """A missing code as a number when it reads as one, else as text."""
    try:
        number = float(value)
    except ValueError:
        return value
    return int(number) if number.is_integer() else number


def check_output(path: Path, inputs: Iterable[Path], option: str = "--out") -> None:
    """Refuse to write over an input file."""
    for source in inputs:
        if source is not None and path.resolve() == Path(source).resolve():
            raise OptionError(f"{option} '{path}' is the input file; imputelab never modifies "
                              "its input: choose another output path")


def print_json(data: Any) -> None:
    """Machine-readable output: JSON on stdout and nothing else."""
    sys.stdout.write(json.dumps(data, indent=2, ensure_ascii=False) + "\n")
    sys.stdout.flush()


def for_a_person(data: Any, *, json: bool, quiet: bool, warnings: Iterable[str] = ()) -> bool:
    """Print ``data`` as JSON (``--json``), or nothing (``--quiet``), or the warnings.

    True when the command should go on printing its tables and lines for a person.
    """
    if json:
        print_json(data)
        return False
    if quiet:
        return False
    for message in warnings:
        warn(message)
    return True


@contextmanager
def progress_bar(description: str, *, quiet: bool):
    """A transient progress bar on stderr; yields ``update(done, total)``."""
    # Only on a terminal: a bar written to a pipe or a log is noise.
    bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), console=err, transient=True,
                   disable=quiet or not err.is_terminal)
    with bar:
        task = bar.add_task(description, total=None)

        def update(done: int, total: int) -> None:
            bar.update(task, completed=done, total=total)

        yield update
