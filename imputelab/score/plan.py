"""Plans: the per-column decision, its evidence, and the rule that chose it.

A plan is plain data written as versioned JSON that a person can read and edit::

    {"format": "imputelab-plan", "version": 3,
     "source": {"file", "rows", "columns", "fingerprint", ...},
     "settings": {...},
     "downstream": {...},  # with a target: every fill scored by models of the target
     "columns": {NAME: {"kind", "missing_fraction", "action", "method", "params",
                        "reason", "scores": {METHOD: {METRIC: VALUE}}, "cleaning": {...},
                        "indicator": false, "evidence": {...},
                        "expected_error": {"metric", "score", "se", "draws"} | null}},
     "survey": {"checks", "mcar_test", "co_missing"}}  # table-wide checks, for the report

``scores`` are *selection* scores: the draws that chose the method. ``expected_error`` is
the chosen method's score on held-out cells no choice saw (see :mod:`imputelab.score.heldout`).

``action`` is ``impute``, ``drop`` (removed from the output) or ``exclude`` (passed through
unchanged: identifiers, free text, the target). A user may change ``method``, ``params``,
``action`` or ``indicator`` and run ``fill`` again.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from imputelab.errors import PlanError, param
from imputelab.io.columns import KINDS
from imputelab.io.tables import atomic_path
from imputelab.metrics.scores import PRIMARY

__all__ = [
    "ACTIONS",
    "PLAN_FORMAT",
    "PLAN_VERSION",
    "READABLE_VERSIONS",
    "ColumnPlan",
    "Plan",
    "choose_method",
]

PLAN_FORMAT = "imputelab-plan"
PLAN_VERSION = 3
#: Versions this imputelab reads: version 1 lacks ``indicator`` and ``evidence``, version 2
#: lacks ``expected_error`` and ``structural`` (both then None).
READABLE_VERSIONS = (1, 2, 3)
ACTIONS = ("impute", "drop", "exclude")


def _round(value: Any) -> Any:
    """Six significant digits: readable, and stable across platforms' last-bit noise."""
    if isinstance(value, float):
        if math.isnan(value) or math.isinf(value):
            return None
        return float(f"{value:.6g}")
    if isinstance(value, dict):
        return {k: _round(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_round(v) for v in value]
    return value


@dataclass
class ColumnPlan:
    """The decision for one column.

    Attributes
    ----------
    kind : str
    missing_fraction : float
    action : {"impute", "drop", "exclude"}
    method : str or None
        Registry name of the fill method (for ``impute``).
    params : dict
        Parameters of the method.
    reason : str
        Why, in words.
    scores : dict
        Selection scores, ``{METHOD: {METRIC: VALUE}}``: mean over every mask and repeat of
        the draws that chose the method, the primary metric's standard error (``METRIC_se``)
        and its mean under each mask (``METRIC@MASK``). They choose; they are not the
        expected error of the choice (the best of several noisy means flatters it).
    skipped : dict
        Methods that could not fill the column, with the reason.
    cleaning : dict
        How cells were read: see :class:`imputelab.io.columns.ColumnSpec`.
    indicator : bool
        Add a 0/1 column ``NAME__was_missing`` beside the filled table (``fill``).
    evidence : dict
        What the survey found about the column's blanks: ``missingness`` (can the other
        columns predict them), ``structural`` (rules that say when a blank is not missing)
        and ``hints``.
    """

    kind: str
    missing_fraction: float
    action: str
    method: str | None = None
    params: dict[str, Any] = field(default_factory=dict)
    reason: str = ""
    scores: dict[str, dict[str, float]] = field(default_factory=dict)
    skipped: dict[str, str] = field(default_factory=dict)
    cleaning: dict[str, Any] = field(default_factory=dict)
    indicator: bool = False
    evidence: dict[str, Any] = field(default_factory=dict)
    expected_error: dict[str, Any] | None = None
    structural: dict[str, Any] | None = None


@dataclass
class Plan:
    """A per-column imputation plan; see the module docstring for the JSON layout."""

    source: dict[str, Any]
    settings: dict[str, Any]
    columns: dict[str, ColumnPlan]
    format: str = PLAN_FORMAT
    version: int = PLAN_VERSION
    downstream: dict[str, Any] = field(default_factory=dict)
    #: The survey's table-wide checks for the report (``checks``, ``mcar_test``, ``co_missing``);
    #: None in plans made before score stored them.
    survey: dict[str, Any] | None = None

    def ranking_metric(self, kind: str) -> str:
        """The score the choice ranked a column of ``kind`` by.

        The primary metric of its family (``settings.metrics``), or the ``choose_by``
        score (``distribution``, ``balanced``) when the plan was made with one.
        """
        choose_by = self.settings.get("choose_by", "accuracy")
        if choose_by != "accuracy":
            return choose_by
        family = "numeric" if kind in ("numeric", "datetime") else "categorical"
        return (self.settings.get("metrics") or PRIMARY).get(family, PRIMARY[family])

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict, floats rounded to six significant digits."""
        return _round({
            "format": self.format,
            "version": self.version,
            "source": self.source,
            "settings": self.settings,
            "downstream": self.downstream,
            "columns": {name: asdict(col) for name, col in self.columns.items()},
            **({"survey": self.survey} if self.survey is not None else {}),
        })

    def to_json(self) -> str:
        """The plan as JSON text (stable: same plan, same bytes)."""
        return json.dumps(self.to_dict(), indent=2, ensure_ascii=False, allow_nan=False) + "\n"

    def save(self, path: str | Path) -> Path:
        """Write the plan atomically."""
        path = Path(path)
        with atomic_path(path) as tmp:
            tmp.write_text(self.to_json(), encoding="utf-8")
        return path

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], *, origin: str = "plan") -> Plan:
        """Validate and build a plan from its JSON form."""
        if not isinstance(data, Mapping) or data.get("format") != PLAN_FORMAT:
            raise PlanError(f"{origin} is not an imputelab plan (no \"format\": \"{PLAN_FORMAT}\")")
        if data.get("version") not in READABLE_VERSIONS:
            readable = (", ".join(str(v) for v in READABLE_VERSIONS[:-1])
                        + f" and {READABLE_VERSIONS[-1]}")
            raise PlanError(
                f"{origin} is plan version {data.get('version')!r}; this imputelab reads "
                f"versions {readable}: run score again to make a new plan"
            )
        for section in ("source", "settings", "downstream", "columns"):
            if not isinstance(data.get(section, {}), Mapping):
                raise PlanError(f"{origin}: \"{section}\" must be a JSON object")
        columns = {}
        for name, raw in (data.get("columns") or {}).items():
            if not isinstance(raw, Mapping):
                raise PlanError(f"{origin}: column '{name}' must be a JSON object")
            try:
                col = ColumnPlan(**raw)
            except TypeError as exc:
                raise PlanError(f"{origin}: column '{name}' is malformed: {exc}") from None
            if col.action not in ACTIONS:
                raise PlanError(
                    f"{origin}: column '{name}' has action '{col.action}'; "
                    f"use one of: {', '.join(ACTIONS)}"
                )
            if col.kind not in KINDS:
                raise PlanError(f"{origin}: column '{name}' has unknown kind '{col.kind}'")
            if not isinstance(col.indicator, bool):
                raise PlanError(f"{origin}: column '{name}': \"indicator\" must be true or "
                                "false")
            _check_structural(col.structural, f"{origin}: column '{name}'")
            if col.action == "impute" and not col.method:
                raise PlanError(f"{origin}: column '{name}' is to be imputed but has no method")
            columns[name] = col
        return cls(source=dict(data.get("source") or {}), settings=dict(data.get("settings") or {}),
                   columns=columns, downstream=dict(data.get("downstream") or {}),
                   survey=dict(data["survey"]) if isinstance(data.get("survey"), Mapping) else None)

    @classmethod
    def load(cls, path: str | Path, *, option: str | None = None) -> Plan:
        """Read a plan file."""
        path = Path(path)
        origin = f"{option or param('plan')} '{path}'"
        if not path.is_file():
            raise PlanError(f"{origin}: no such file; make one with 'imputelab score'")
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise PlanError(f"{origin} is not valid JSON: {exc}") from None
        return cls.from_dict(data, origin=origin)


STRUCTURAL_OPS = ("==", "in", "is blank")


def _check_structural(rule: Any, where: str) -> None:
    """A plan's structural rule: an object with a known condition and a stand-in value."""
    if rule is None:
        return
    if not isinstance(rule, Mapping):
        raise PlanError(f"{where}: \"structural\" must be a JSON object or null")
    missing = [k for k in ("other", "op", "values", "value") if k not in rule]
    if missing:
        raise PlanError(f"{where}: \"structural\" lacks {', '.join(missing)}")
    if rule["op"] not in STRUCTURAL_OPS:
        raise PlanError(f"{where}: structural \"op\" must be one of "
                        f"{', '.join(STRUCTURAL_OPS)}, got {rule['op']!r}")
    if not isinstance(rule["values"], list) or (rule["op"] != "is blank" and not rule["values"]):
        raise PlanError(f"{where}: structural \"values\" must be a list of the condition's "
                        "values")


def choose_method(
    summary: Mapping[str, tuple[float, float]],
    simplicity: Mapping[str, int],
    *,
    metric: str,
    greater_is_better: bool,
    order: Sequence[str] = (),
    paired_se: Mapping[str, float] | None = None,
) -> tuple[str, str]:
    """The one-standard-error rule: the simplest method within one SE of the best.

    Parameters
    ----------
    summary : mapping
        ``{method: (mean, standard_error)}`` of the primary metric.
    simplicity : mapping
        Rank of each method (lower is simpler).
    metric : str
        Name of the metric (for the reason).
    greater_is_better : bool
    order : sequence of str
        Tie-break order for methods of equal simplicity and equal mean.
    paired_se : mapping, optional
        Standard error of each method's per-draw difference from the best method on the same
        hidden cells. When given, a method is close when its mean is within its own paired
        SE of the best (draws that are hard for every method no longer widen the band);
        otherwise within the best method's SE.

    Returns
    -------
    method, reason : str

    Examples
    --------
    >>> choose_method({"mean": (0.70, 0.01), "chained-forest": (0.69, 0.02)},
    ...               {"mean": 1, "chained-forest": 4}, metric="nrmse",
    ...               greater_is_better=False)[0]
    'mean'
    """
    usable = {m: v for m, v in summary.items() if v[0] is not None and math.isfinite(v[0])}
    if not usable:
        raise PlanError(f"no method produced a finite {metric}")
    sign = -1.0 if greater_is_better else 1.0
    rank = {m: i for i, m in enumerate(order)}
    best = min(usable, key=lambda m: (sign * usable[m][0], rank.get(m, 99)))
    best_mean, best_se = usable[best]
    se = best_se if math.isfinite(best_se) else 0.0

    def band(m: str) -> float:
        if paired_se is None:
            return se
        value = paired_se.get(m, 0.0)
        return value if math.isfinite(value) else 0.0

    close = [m for m, (mean, _) in usable.items()
             if (mean <= best_mean + band(m) if not greater_is_better
                 else mean >= best_mean - band(m))]
    chosen = min(close, key=lambda m: (simplicity.get(m, 99), sign * usable[m][0],
                                       rank.get(m, 99)))
    ranking = sorted(usable, key=lambda m: sign * usable[m][0])
    runner = next((m for m in ranking if m != best), None)
    spread = f"± {best_se:.2g} SE" if best_se > 0 else "one draw: no SE"
    text = f"{best} had the best mean {metric} ({best_mean:.4g} {spread})"
    if chosen != best:
        which = "of the paired differences" if paired_se is not None else ""
        text += (f"; {chosen} ({usable[chosen][0]:.4g}) is within one standard error "
                 f"{which} and simpler, so it is chosen").replace("  ", " ")
    elif runner is not None:
        text += f"; next was {runner} ({usable[runner][0]:.4g})"
    return chosen, text
