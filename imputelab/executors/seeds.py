"""The one derivation of a task's seed from the run's seed and the task's name."""

from __future__ import annotations

import hashlib
import json

__all__ = ["derive_seed"]


def derive_seed(*parts: int | str) -> int:
    """A 31-bit seed from a tuple of ints and names (stable across runs and platforms).

    The parts are hashed as their JSON text, so ``(0, "mcar", 0)`` and ``(0, "mcar")`` differ
    and a name never collides with a number.

    Parameters
    ----------
    *parts : int or str
        The run's seed first, then what tells the task apart (mask, draw, column, sweep...).

    Returns
    -------
    int
        A seed in ``[0, 2**31)``.

    Examples
    --------
    >>> derive_seed(0, "mcar", 1) == derive_seed(0, "mcar", 1)
    True
    >>> derive_seed(0, "mcar", 1) == derive_seed(0, "mcar", "1")
    False
    """
    text = json.dumps([p if isinstance(p, str) else int(p) for p in parts])
    digest = hashlib.sha256(text.encode()).digest()
    return int.from_bytes(digest[:4], "little") >> 1
