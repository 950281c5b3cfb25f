"""The settings of a benchmark run, and the names its results give the plan and the floor."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from imputelab.bench.datasets import dataset_names
from imputelab.errors import OptionError
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
                raise OptionError(f"--datasets: unknown dataset '{name}'; choose from: "
                                  f"{', '.join(known)}")
        if self.datasets is not None and not self.datasets:
            raise OptionError("--datasets: give at least one dataset")
        if not self.masks:
            raise OptionError("--masks: give at least one mask")
        for name in self.masks:
            if name not in get_mask_names() or name == "pattern":
                raise OptionError(f"--masks: '{name}' is not a mask the benchmark can use; "
                                  "choose from: mar, mcar, mnar (complete rows have no "
                                  "holes for pattern to replay)")
        if not 0.0 < self.rate < 1.0:
            raise OptionError(f"--rate must be strictly between 0 and 1, got {self.rate}")
        if self.repeats < 1:
            raise OptionError(f"--repeats must be at least 1, got {self.repeats}")
        if self.selection_repeats < 1:
            raise OptionError("--selection-repeats must be at least 1")
        if self.max_rows is not None and self.max_rows < 50:
            raise OptionError(f"--max-rows must be at least 50, got {self.max_rows}")
        if self.seed < 0:
            raise OptionError(f"--seed must be 0 or more, got {self.seed}")
