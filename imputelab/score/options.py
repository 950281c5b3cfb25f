"""The settings of ``score``: :class:`ScoreOptions` and the names it accepts."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

from imputelab.checks import check_choice, check_count, check_seed, check_share
from imputelab.errors import OptionError, param
from imputelab.masks import get_mask_names
from imputelab.methods import METHODS, get_method_names
from imputelab.metrics.scores import PRIMARY, get_metric
from imputelab.survey.table import SurveyOptions

__all__ = ["CHOICE_RULES", "CHOOSE_BY", "DEFAULT_MASKS", "MIN_OBSERVED", "ScoreOptions"]

DEFAULT_MASKS = ("mcar", "mar", "mnar")
CHOOSE_BY = ("accuracy", "distribution", "balanced")
CHOICE_RULES = ("table", "paired", "unpaired")
MIN_OBSERVED = 10  # fewer observed cells than this cannot be split into hidden and kept


@dataclass
class ScoreOptions:
    """Settings of the experiment.

    Attributes
    ----------
    survey : SurveyOptions
    masks : sequence of str, optional
        Mask names; by default :data:`DEFAULT_MASKS`, plus ``pattern`` when the scored
        columns have holes whose patterns can be replayed.
    rate : float
        Share of each column's observed cells hidden per draw.
    repeats : int
        Draws per mask.
    seed : int
    methods : sequence of str, optional
        Candidate methods (all registered by default).
    metrics : dict
        Primary metric per kind (``numeric``, ``categorical``).
    sample : int, optional
        Run the experiment on at most this many rows (fill always uses every row).
    use_target : bool
        Let the target serve as a feature when filling the others.
    n_jobs : int
    choose_by : {"accuracy", "distribution", "balanced"}
        What the one-standard-error rule ranks by: the primary metric; ``distribution``
        (wasserstein + corr_shift for numbers, total variation for labels); or
        ``balanced``, the mean of nrmse (pfc for labels) and ``distribution``.
    downstream : bool
        With a target, also score every fill by cross-validated models of the target
        (:mod:`imputelab.score.target`); the target never fills a feature there.
    downstream_folds : int
        Folds of that experiment.
    choice_rule : {"table", "paired", "unpaired"}
        ``table``: every column of a kind takes the method with the best mean score over all
        those columns, unless another method beats it on the column by more than two
        standard errors of their paired per-draw differences. ``paired``: the one-SE rule
        per column with the SE of each method's per-draw difference from the best on the
        same hidden cells; ``unpaired``: the one-SE rule with the best method's own SE.
    """

    survey: SurveyOptions = field(default_factory=SurveyOptions)
    masks: Sequence[str] | None = None
    rate: float = 0.2
    repeats: int = 3
    seed: int = 0
    methods: Sequence[str] | None = None
    metrics: dict[str, str] = field(default_factory=lambda: dict(PRIMARY))
    sample: int | None = 10_000
    use_target: bool = False
    n_jobs: int = 1
    choose_by: str = "accuracy"
    downstream: bool = True
    downstream_folds: int = 5
    choice_rule: str = "table"

    def validate(self) -> None:
        """Check ranges and names; raise :class:`OptionError`."""
        check_share(self.rate, "rate")
        check_seed(self.seed)
        check_count(self.repeats, "repeats")
        if self.sample is not None:
            check_count(self.sample, "sample", low=20)
        for name in self.masks or ():
            if name not in get_mask_names():
                raise OptionError(f"{param('masks')}: unknown mask '{name}'; choose from: "
                                  f"{', '.join(get_mask_names())}")
        if self.masks is not None and not self.masks:
            raise OptionError(f"{param('masks')}: give at least one mask")
        for name in self.methods or ():
            if name not in METHODS:
                raise OptionError(
                    f"{param('methods')}: unknown method '{name}'; choose from: "
                    f"{', '.join(get_method_names())}")
        if self.methods is not None and not self.methods:
            raise OptionError(f"{param('methods')}: give at least one method")
        check_count(self.downstream_folds, "target_folds", low=2)
        check_choice(self.choice_rule, "choice_rule", CHOICE_RULES)
        check_choice(self.choose_by, "choose_by", CHOOSE_BY)
        for kind, metric in self.metrics.items():
            found = get_metric(metric)
            if found.kind != kind:
                raise OptionError(f"{param('metric')} {metric} is a {found.kind} metric, "
                                  f"not {kind}")
