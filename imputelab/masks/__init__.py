"""Masks: ways to hide observed cells so imputation can be scored against the truth.

Takes a working frame, a rate and a seed, and gives the cells to hide (a boolean frame of
observed cells only) by MCAR, MAR, MNAR or the file's own row patterns of blanks; the
registry :data:`MASKS` maps each name to its :class:`~imputelab.masks.base.Mask` subclass.
"""

from __future__ import annotations

from typing import Any

from imputelab.errors import OptionError
from imputelab.masks.base import Mask, hidden_count
from imputelab.masks.mar import MARMask
from imputelab.masks.mcar import MCARMask
from imputelab.masks.mnar import MNARMask
from imputelab.masks.pattern import PatternMask

__all__ = [
    "MASKS",
    "MARMask",
    "MCARMask",
    "MNARMask",
    "Mask",
    "PatternMask",
    "get_mask",
    "get_mask_names",
    "hidden_count",
]

MASKS: dict[str, type[Mask]] = {
    "mcar": MCARMask,
    "mar": MARMask,
    "mnar": MNARMask,
    "pattern": PatternMask,
}


def get_mask_names() -> list[str]:
    """Names of the registered masks, sorted."""
    return sorted(MASKS)


def get_mask(name: str, **params: Any) -> Mask:
    """Build the mask registered as ``name`` with the given parameters.

    Parameters
    ----------
    name : str
        A key of :data:`MASKS`.
    **params
        Passed to the mask's constructor.

    Returns
    -------
    Mask

    Raises
    ------
    OptionError
        If ``name`` is not registered or a parameter is not accepted by that mask.
    """
    try:
        cls = MASKS[name]
    except (KeyError, TypeError):
        raise OptionError(
            f"unknown mask {name!r}; choose from: {', '.join(get_mask_names())}"
        ) from None
    try:
        return cls(**params)
    except TypeError:
        accepted = ", ".join(cls().get_params()) or "none"
        given = ", ".join(sorted(params))
        raise OptionError(
            f"mask {name!r} does not take parameter(s) {given}; it takes: {accepted}"
        ) from None
