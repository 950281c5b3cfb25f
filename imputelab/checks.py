"""Checks of parameter values at the boundary of the core, each raising one :class:`OptionError`.

Every message names the parameter with :func:`imputelab.errors.param`, so the command line can
show the flag that sets it.
"""

from __future__ import annotations

import numbers
from collections.abc import Iterable
from typing import Any

from imputelab.errors import OptionError, param

__all__ = ["check_choice", "check_count", "check_seed", "check_share"]


def check_count(value: Any, name: str, *, low: int = 1) -> int:
    """A whole number of at least ``low`` (booleans refused), returned as ``int``."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < low:
        raise OptionError(f"{param(name)} must be a whole number of at least {low}, "
                          f"got {value!r}")
    return int(value)


def check_seed(value: Any, name: str = "seed") -> int:
    """A non-negative whole number usable as a random seed."""
    return check_count(value, name, low=0)


def check_share(value: Any, name: str, *, closed: bool = False) -> float:
    """A number strictly between 0 and 1 (or from 0 to 1 inclusive with ``closed``)."""
    ok = (isinstance(value, numbers.Real) and not isinstance(value, bool)
          and (0 <= value <= 1 if closed else 0 < value < 1))
    if not ok:
        bounds = "from 0 to 1" if closed else "strictly between 0 and 1"
        raise OptionError(f"{param(name)} must be a number {bounds}, got {value!r}")
    return float(value)


def check_choice(value: Any, name: str, choices: Iterable[str]) -> str:
    """One of ``choices``."""
    options = list(choices)
    if value not in options:
        raise OptionError(f"{param(name)} '{value}': choose one of {', '.join(options)}")
    return str(value)
