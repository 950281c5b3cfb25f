"""Exceptions and the warning class of imputelab's core.

The tree::

    ImputelabError            anything the user can fix by changing input or options
    ├── TableIOError          a file cannot be read or written (missing, empty, undecodable)
    ├── DataError             the table's content does not allow the request (unknown column, ...)
    ├── OptionError           an option's value is malformed or out of range
    └── PlanError             a plan file is unreadable, of an unknown version, or does not match

    ImputelabWarning          something the user should know that does not stop the work

The core names parameters, never command-line flags: a message marks a parameter with
:func:`param` (it reads `` `n_jobs` `` in Python) and the command line shows each marked name
as its flag (``cli/_flags.py``). The command line turns each error into one line on stderr and exit
code 2. Any other exception is a bug.
"""

from __future__ import annotations

import re

__all__ = [
    "DataError",
    "ImputelabError",
    "ImputelabWarning",
    "OptionError",
    "PlanError",
    "TableIOError",
    "param",
    "param_names",
]

#: How :func:`param` marks a name inside a message.
_MARK = re.compile(r"`([a-z][a-z0-9_]*)`")


def param(name: str) -> str:
    """Mark a parameter's name in an error or warning message.

    Parameters
    ----------
    name : str
        The keyword of the Python function or setting (``"n_jobs"``, ``"fit_on"``).

    Returns
    -------
    str
        The name between backquotes; the command line replaces it by the flag that sets it.
    """
    return f"`{name}`"


def param_names(message: str) -> list[str]:
    """The parameter names that :func:`param` marked in a message, in order."""
    return _MARK.findall(message)


def render_params(message: str, names: dict[str, str]) -> str:
    """Replace each marked parameter whose name is a key of ``names`` by its value."""
    return _MARK.sub(lambda m: names.get(m.group(1), m.group(0)), message)


class ImputelabError(Exception):
    """Base class of the errors a user can fix."""


class TableIOError(ImputelabError):
    """A table file cannot be read or written."""


class DataError(ImputelabError):
    """The table's content does not allow what was asked."""


class OptionError(ImputelabError):
    """An option's value is malformed or out of range."""


class PlanError(ImputelabError):
    """A plan file is unreadable, of an unknown version, or does not match the table."""


class ImputelabWarning(UserWarning):
    """A note on the data or the run that does not stop it (new tokens read as missing, ...)."""
