"""Exceptions raised by imputelab's core.

The tree::

    ImputelabError            anything the user can fix by changing input or options
    ├── TableIOError          a file cannot be read or written (missing, empty, undecodable)
    ├── DataError             the table's content does not allow the request (unknown column, ...)
    ├── OptionError           an option's value is malformed or out of range
    └── PlanError             a plan file is unreadable, of an unknown version, or does not match

The command line turns each of these into one line on stderr and exit code 2. Any other
exception is a bug.
"""

from __future__ import annotations

__all__ = ["DataError", "ImputelabError", "OptionError", "PlanError", "TableIOError"]


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
