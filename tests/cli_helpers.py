"""Small helpers shared by the command-line tests: run a command, read a CSV's raw text."""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

from typer.testing import CliRunner, Result

from imputelab.cli import app


def invoke(*args: Any, env: dict[str, str] | None = None) -> Result:
    """Run ``imputelab ARGS...`` in-process."""
    return CliRunner().invoke(app, [str(a) for a in args], env=env)


def ok(result: Result) -> Result:
    """The result, after asserting the command succeeded."""
    assert result.exit_code == 0, f"exit {result.exit_code}: {result.stderr}"
    return result


def read_cells(path: Path) -> tuple[list[str], list[list[str]]]:
    """Header and rows as the text in the file (Python's csv module, no type guessing)."""
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    return rows[0], rows[1:]


def column(path: Path, name: str) -> list[str]:
    """One column's cells as text."""
    header, rows = read_cells(path)
    i = header.index(name)
    return [row[i] for row in rows]


def load(path: Path) -> dict[str, Any]:
    """A JSON file."""
    return json.loads(path.read_text(encoding="utf-8"))
