"""Fill methods and their registry.

Takes a working frame with holes and the columns to fill, and gives the same frame with those
holes filled (observed cells, shape, index and dtypes untouched), from simple constants and
column statistics to nearest neighbours and chained equations; each
:class:`~imputelab.methods.base.FillMethod` is fitted once and replays on new rows, and
:data:`METHODS` maps the names used in plans to the classes.
"""

from __future__ import annotations

from typing import Any

from imputelab.errors import OptionError
from imputelab.methods.base import FillMethod
from imputelab.methods.blend import BlendFill
from imputelab.methods.chained import ChainedBoostedFill, ChainedForestFill, ChainedLinearFill
from imputelab.methods.knn import KNNFill
from imputelab.methods.simple import ConstantFill, MeanFill, MedianFill, ModeFill

__all__ = ["METHODS", "FillMethod", "get_method", "get_method_names"]

METHODS: dict[str, type[FillMethod]] = {
    "constant": ConstantFill,
    "mean": MeanFill,
    "median": MedianFill,
    "mode": ModeFill,
    "knn": KNNFill,
    "chained-linear": ChainedLinearFill,
    "chained-forest": ChainedForestFill,
    "chained-boosted": ChainedBoostedFill,
    "blend": BlendFill,
}


def get_method_names() -> list[str]:
    """Registered method names, simplest first."""
    return sorted(METHODS, key=lambda n: (METHODS[n].simplicity, list(METHODS).index(n)))


def get_method(name: str, **params: Any) -> FillMethod:
    """A new, unfitted method by registry name.

    Raises
    ------
    OptionError
        For an unknown name or parameter.
    """
    if name not in METHODS:
        raise OptionError(
            f"unknown method '{name}'; choose from: {', '.join(get_method_names())}"
        )
    cls = METHODS[name]
    valid = cls._get_param_names()
    unknown = sorted(set(params) - set(valid))
    if unknown:
        raise OptionError(
            f"method '{name}' has no parameter {', '.join(unknown)}; "
            f"its parameters are: {', '.join(valid) or '(none)'}"
        )
    return cls(**params)
