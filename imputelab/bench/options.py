"""The settings of a benchmark run, and the names its results give the plan and the floor."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from imputelab.bench.datasets import dataset_names
from imputelab.checks import check_count, check_seed, check_share
from imputelab.errors import OptionError, param
from imputelab.masks import get_mask_names

__all__ = ["BAYES", "DEFAULT_MASKS", "PLAN", "BenchOptions"]

DEFAULT_MASKS = ("mcar", "mar")
PLAN = "plan"
BAYES = "bayes-floor"

@dataclass
class BenchOptions:
    """Settings of a benchmark run.

    Attributes
    ----------
    datasets : sequence of str, optional
        Dataset names (default: every meta file).
    masks : sequence of str
    rate : float
    repeats : int
        Scored draws per mask.
    seed : int
    california : path, optional
        The California housing CSV.
    selection_repeats : int
        Draws per mask of the plan's own ``score`` run.
    max_rows : int, optional
        Cap on the complete rows used per dataset (a seeded sample); a meta file's
        ``[bench] max_rows`` applies when it is smaller.
    n_jobs : int
    """

    datasets: Sequence[str] | None = None
    masks: Sequence[str] = DEFAULT_MASKS
    rate: float = 0.2
    repeats: int = 5
    seed: int = 0
    california: Path | None = None
    selection_repeats: int = 3
    max_rows: int | None = None
    n_jobs: int = 1

    def validate(self) -> None:
        """Check names and ranges; raise :class:`OptionError`."""
        known = dataset_names()
        for name in self.datasets or ():
            if name not in known:
                raise OptionError(f"{param('datasets')}: unknown dataset '{name}'; choose from: "
                                  f"{', '.join(known)}")
        if self.datasets is not None and not self.datasets:
            raise OptionError(f"{param('datasets')}: give at least one dataset")
        if not self.masks:
            raise OptionError(f"{param('masks')}: give at least one mask")
        for name in self.masks:
            if name not in get_mask_names() or name == "pattern":
                raise OptionError(f"{param('masks')}: '{name}' is not a mask the benchmark can "
                                  "use; choose from: mar, mcar, mnar (complete rows have no "
                                  "holes for pattern to replay)")
        check_share(self.rate, "rate")
        check_count(self.repeats, "repeats")
        check_count(self.selection_repeats, "selection_repeats")
        if self.max_rows is not None:
            check_count(self.max_rows, "max_rows", low=50)
        check_seed(self.seed)
