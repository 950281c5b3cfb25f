"""Flags are named only in cli/: the core marks parameters, cli/ maps them to real options."""

from __future__ import annotations

import re
from pathlib import Path

import typer

import imputelab
from imputelab.cli import app
from imputelab.cli._flags import FLAGS, as_flags
from imputelab.errors import param, param_names

PACKAGE = Path(imputelab.__file__).parent
# A flag in text: "--name" not preceded by a word character or by "var(" (CSS custom properties).
FLAG = re.compile(r"(?<![\w(])--[a-z][a-z-]*(?![a-z-]|:)")  # not CSS custom properties
MARKED = re.compile(r"""param\(\s*["']([a-z0-9_]+)["']\s*\)""")


def core_files() -> list[Path]:
    return [p for p in PACKAGE.rglob("*.py") if "cli" not in p.relative_to(PACKAGE).parts]


def test_no_flag_is_named_outside_cli():
    found = [f"{p.relative_to(PACKAGE)}:{n}: {m.group(0)}"
             for p in core_files()
             for n, line in enumerate(p.read_text().splitlines(), 1)
             for m in FLAG.finditer(line)]
    assert found == []


def test_every_marked_parameter_has_a_flag():
    marked = {name for p in core_files() for name in MARKED.findall(p.read_text())}
    assert marked, "the core marks no parameter at all: the pattern is broken"
    assert sorted(marked - set(FLAGS)) == []


def test_every_mapped_flag_is_a_real_option():
    command = typer.main.get_command(app)
    options = set()
    for sub in command.commands.values():  # type: ignore[attr-defined]
        for p in sub.params:
            if p.param_type_name == "option":
                options.update(p.opts)
                options.update(p.secondary_opts)
    assert sorted(flag for flag in FLAGS.values() if flag not in options) == []


def test_marked_names_read_as_python_names_and_as_flags_on_the_command_line():
    message = f"{param('n_jobs')} must be 0 or more; or pass {param('force')} (see `x`)"
    assert str(ValueError(message)) == "`n_jobs` must be 0 or more; or pass `force` (see `x`)"
    assert param_names(message) == ["n_jobs", "force", "x"]
    # an unmapped name stays as written
    assert as_flags(message) == "--jobs must be 0 or more; or pass --force (see `x`)"
