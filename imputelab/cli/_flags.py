"""The command line's names for the core's parameters, and its exit codes.

The core marks a parameter's name in its messages (:func:`imputelab.errors.param`); before a
message reaches the user, :func:`as_flags` shows each marked name as the flag that sets it.
"""

from __future__ import annotations

from imputelab.errors import render_params

__all__ = ["EXIT_BUG", "EXIT_INTERRUPTED", "EXIT_OK", "EXIT_USAGE", "FLAGS", "as_flags"]

#: Exit codes: done, a bug (an unexpected exception), bad input or usage, interrupted.
EXIT_OK = 0
EXIT_BUG = 1
EXIT_USAGE = 2
EXIT_INTERRUPTED = 130

#: Core parameter -> flag. A parameter the core marks must be listed here (a test checks).
FLAGS: dict[str, str] = {
    "california": "--california",
    "checks": "--checks",
    "choose_by": "--choose-by",
    "chunk_rows": "--chunk-rows",
    "cluster": "--cluster",
    "datasets": "--datasets",
    "date_formats": "--date-format",
    "draws": "--draws",
    "drop_threshold": "--drop-threshold",
    "fit_on": "--fit-on",
    "fit_sample": "--fit-sample",
    "force": "--force",
    "kinds": "--kind",
    "masks": "--masks",
    "max_rows": "--max-rows",
    "methods": "--methods",
    "metric": "--metric",
    "missing_codes": "--missing-code",
    "model": "--model",
    "n_jobs": "--jobs",
    "no_checks": "--no-checks",
    "out": "--out",
    "overwrite": "--overwrite",
    "plan": "--plan",
    "rate": "--rate",
    "repeats": "--repeats",
    "report": "--report",
    "sample": "--sample",
    "seed": "--seed",
    "selection_repeats": "--selection-repeats",
    "stream": "--stream",
    "target": "--target",
    "target_check": "--target-check",
    "target_folds": "--target-folds",
    "unseen": "--unseen",
    "use_target": "--use-target",
}


def as_flags(message: str) -> str:
    """The message with each marked core parameter shown as its flag."""
    return render_params(message, FLAGS)
