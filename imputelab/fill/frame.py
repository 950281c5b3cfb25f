"""``fill``: apply a plan to a table: the plan's cleaning, then its methods, hole by hole."""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import pandas as pd
from threadpoolctl import threadpool_limits

from imputelab.errors import DataError, ImputelabError, OptionError, PlanError, param
from imputelab.executors.seeds import derive_seed
from imputelab.fill.structural import apply_structural
from imputelab.fill.text import render_text
from imputelab.frame.encoding import Encoding, with_derived
from imputelab.frame.setup import working_setup
from imputelab.io.columns import INDICATOR_SUFFIX, ColumnSpec, clean_column, new_token_warnings
from imputelab.io.tables import Table
from imputelab.methods import METHODS, get_method, get_method_names
from imputelab.score.plan import Plan

__all__ = [
    "FillReport",
    "FittedFill",
    "check_plan",
    "checked_clean",
    "clean_with_plan",
    "column_differences",
    "fill_frame",
    "fill_table",
    "finish_output",
    "fit_plan",
    "missing_indicators",
]


@dataclass
class FillReport:
    """What a fill did.

    Attributes
    ----------
    filled : dict
        Cells filled per imputed column.
    dropped, excluded : list of str
    new_tokens : dict
        Cells that became missing in this file but were not seen when the plan was made.
    warnings : list of str
    """

    filled: dict[str, int] = field(default_factory=dict)
    methods: dict[str, str] = field(default_factory=dict)
    dropped: list[str] = field(default_factory=list)
    excluded: list[str] = field(default_factory=list)
    new_tokens: dict[str, dict[str, int]] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict."""
        return {"filled": self.filled, "methods": self.methods, "dropped": self.dropped,
                "excluded": self.excluded, "new_tokens": self.new_tokens,
                "warnings": self.warnings}


def _specs(plan: Plan) -> dict[str, ColumnSpec]:
    out = {}
    for name, col in plan.columns.items():
        # A user's edit of the kind wins; a hand-written column may give no cleaning at all.
        spec = ColumnSpec.from_dict({**(col.cleaning or {}), "kind": col.kind})
        out[name] = spec
    return out


def check_plan(plan: Plan, table: Table, *, force: bool = False,
               content: bool = True) -> list[str]:
    """Check that a plan fits a table.

    Raises
    ------
    PlanError
        When the fingerprint or the columns differ (unless ``force``).

    Returns
    -------
    list of str
        Warnings (what ``force`` let through).
    """
    warnings: list[str] = []

    def mismatch(message: str, advice: str) -> None:
        if not force:
            raise PlanError(f"{message}; {advice}")
        warnings.append(message)

    where = f"{param('plan')} was made from '{plan.source.get('file')}'"
    differences = column_differences(list(plan.columns), list(table.frame.columns),
                                     lacking="missing from the file", extra="not in the plan")
    if differences:
        mismatch(f"{where} and its columns do not match '{table.path}' ({differences})",
                 f"run score on this file, or pass {param('force')} to fill the planned "
                 "columns present and pass the others through")
    fingerprint = plan.source.get("fingerprint", "")
    if content and fingerprint and fingerprint != f"sha256:{table.fingerprint}":
        mismatch(f"{where}, and '{table.path}' has different content (fingerprint "
                 f"{fingerprint[:19]}... vs sha256:{table.fingerprint[:12]}...)",
                 f"pass {param('force')} to fill it with the same plan (methods are fitted on "
                 "this file), or run score on it")
    return warnings


def column_differences(planned: list[str], present: list[str], *, lacking: str,
                       extra: str) -> str:
    """How a plan's columns and a table's differ, ``""`` when they do not.

    Returns
    -------
    str
        ``"LACKING: a, b; EXTRA: c"``: the planned columns the table lacks, after ``lacking``,
        then the table's columns the plan does not know, after ``extra``.
    """
    parts = []
    missing = [c for c in planned if c not in present]
    added = [c for c in present if c not in planned]
    if missing:
        parts.append(f"{lacking}: {', '.join(missing)}")
    if added:
        parts.append(f"{extra}: {', '.join(added)}")
    return "; ".join(parts)


def clean_with_plan(table: Table, plan: Plan) -> tuple[pd.DataFrame, dict[str, dict[str, int]]]:
    """Read a table's cells exactly as the plan says: its kinds, codes and date formats.

    Returns
    -------
    typed : DataFrame
        Columns present in both the plan and the table, in table order, plus unplanned
        columns as they are.
    new_tokens : dict
        Per column, tokens turned into missing that the plan had not recorded.
    """
    specs = _specs(plan)
    typed, new_tokens = {}, {}
    for name in table.frame.columns:
        if name not in specs:
            typed[name] = table.frame[name]
            continue
        values, tokens = clean_column(table.frame[name], specs[name], decimal=table.decimal)
        typed[name] = values
        unseen = {t: c for t, c in tokens.items() if t not in specs[name].tokens}
        if unseen:
            new_tokens[name] = unseen
    return pd.DataFrame(typed, index=table.frame.index), new_tokens


def _groups(plan: Plan, targets: list[str]) -> dict[str, tuple[str, dict[str, Any], list[str]]]:
    groups: dict[str, tuple[str, dict[str, Any], list[str]]] = {}
    for name in targets:
        col = plan.columns[name]
        key = f"{col.method}|{json.dumps(col.params, sort_keys=True)}"
        groups.setdefault(key, (col.method, dict(col.params), []))[2].append(name)
    return groups


@dataclass
class _Group:
    """One method of a plan and the columns it fills (``joint``: the ones it models)."""

    method_name: str
    columns: list[str]
    joint: list[str]
    method: Any
    edited: dict[str, Any]


@dataclass
class FittedFill:
    """A plan's methods fitted on one table, ready to fill any table with the same columns.

    Made by :func:`fit_plan`; :meth:`apply` fills a cleaned table with it without refitting.

    Attributes
    ----------
    plan : Plan
    encoding : Encoding
        The working-frame encoding learned on the training table (labels, ranges, rounding).
    targets : list of str
        Columns the plan imputes.
    groups : list
        Each method with the columns it fills, fitted.
    """

    plan: Plan
    encoding: Encoding
    targets: list[str]
    groups: list[_Group]

    def apply(self, typed: pd.DataFrame, report: FillReport | None = None) -> pd.DataFrame:
        """Fill a cleaned table (see :func:`clean_with_plan`) with the fitted methods.

        Returns
        -------
        DataFrame
            ``typed`` without the dropped columns and with every hole of the imputed columns
            filled; every other cell, the column order and the dtypes unchanged.
        """
        report = report if report is not None else FillReport()
        work = self.encoding.encode(typed)
        filled = work.copy()
        with threadpool_limits(limits=1, user_api="blas"):
            for group in self.groups:
                out = _guarded(group, lambda g=group: g.method.transform(
                    with_derived(work, self.encoding.kinds)))
                for name in group.columns:
                    filled[name] = out[name]
                    report.methods[name] = group.method_name
        return _finish(self.plan, self.encoding, self.targets, filled, typed, report)


def _setup(plan: Plan, frame: pd.DataFrame) -> tuple[list[str], Encoding]:
    specs = _specs(plan)
    actions = {n: c.action for n, c in plan.columns.items() if n in frame.columns}
    targets, encoding = working_setup(frame, specs, actions, target=plan.settings.get("target"),
                                      use_target=bool(plan.settings.get("use_target")))
    for name in targets:
        if frame[name].notna().sum() == 0:
            raise DataError(f"column '{name}' has no observed value to learn a fill from; "
                            f"set its action to \"drop\" in the plan")
    return targets, encoding


def _make_groups(plan: Plan, typed: pd.DataFrame, targets: list[str], encoding: Encoding,
                 report: FillReport) -> list[_Group]:
    seed = int(plan.settings.get("seed", 0))
    groups = []
    for method_name, params, columns in _groups(plan, targets).values():
        method = _make_method(method_name, params, columns, seed, report)
        reasons = {n: method.unsupported_reason(encoding.kinds[n], typed[n].dtype,
                                                len(encoding.categories.get(n, [])) or None)
                   for n in targets}
        joint = [n for n in targets if reasons[n] is None]
        if not method.uses_other_columns:  # a statistic: nothing to gain from more columns
            joint = [n for n in joint if n in columns]
        bad = [n for n in columns if n not in joint]
        if bad:
            raise PlanError(f"plan: column '{bad[0]}': {reasons[bad[0]]}; "
                            "choose another method in the plan")
        edited = {k: v for k, v in method.get_params().items()
                  if k != "random_state" and v != METHODS[method_name]().get_params()[k]}
        groups.append(_Group(method_name, columns, joint, method, edited))
    return groups


def _guarded(group: _Group, work: Any) -> Any:
    """Run a group's fit or fill; a failure under edited params is the plan's fault."""
    try:
        return work()
    except PlanError:
        raise
    except Exception as exc:
        # A method's own parameter check (OptionError) or an unexpected failure under edited
        # params is the plan's fault; other errors are the data's, and default settings
        # failing is a bug.
        plan_fault = isinstance(exc, OptionError) or not isinstance(exc, ImputelabError)
        if not (group.edited and plan_fault):
            raise
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise PlanError(
            f"plan: column '{group.columns[0]}': {group.method_name} failed with params "
            f"{json.dumps(group.edited, sort_keys=True)} ({first}); fix them in the plan"
        ) from None


def _finish(plan: Plan, encoding: Encoding, targets: list[str], filled: pd.DataFrame,
            typed: pd.DataFrame, report: FillReport) -> pd.DataFrame:
    constants = [n for n in targets if plan.columns[n].method == "constant"]
    result = encoding.decode(filled, typed, unclipped=constants)
    result = apply_structural(plan, typed, result)  # stand-ins where a rule's condition holds
    actions = {n: c.action for n, c in plan.columns.items() if n in typed.columns}
    for name in targets:
        report.filled[name] = int(typed[name].isna().sum() - result[name].isna().sum())
    report.dropped = [n for n, a in actions.items() if a == "drop"]
    report.excluded = [n for n, a in actions.items() if a == "exclude"]
    return result.drop(columns=report.dropped)


def fit_plan(typed: pd.DataFrame, plan: Plan, report: FillReport | None = None) -> FittedFill:
    """Fit every method of a plan on a cleaned table, for every column it imputes.

    Parameters
    ----------
    typed : DataFrame
        Cleaned training table (see :func:`clean_with_plan`).
    plan : Plan
    report : FillReport, optional
        Collects warnings (e.g. parameters a method does not take).

    Returns
    -------
    FittedFill
    """
    report = report if report is not None else FillReport()
    targets, encoding = _setup(plan, typed)
    groups = _make_groups(plan, typed, targets, encoding, report)
    train = with_derived(encoding.encode(typed), encoding.kinds)
    with threadpool_limits(limits=1, user_api="blas"):
        for group in groups:
            _guarded(group, lambda g=group: g.method.fit(train, g.joint))
    return FittedFill(plan=plan, encoding=encoding, targets=targets, groups=groups)


def fill_frame(
    typed: pd.DataFrame,
    plan: Plan,
    *,
    fit_on: pd.DataFrame | None = None,
    report: FillReport | None = None,
) -> pd.DataFrame:
    """Fill a cleaned frame by the plan.

    Parameters
    ----------
    typed : DataFrame
        Cleaned table (see :func:`clean_with_plan`).
    plan : Plan
    fit_on : DataFrame, optional
        Cleaned reference table on which the methods are fitted (default: ``typed``).
    report : FillReport, optional
        Filled in with what was done.

    Returns
    -------
    DataFrame
        ``typed`` without the dropped columns; every hole of the imputed columns filled; every
        other cell, the column order and the dtypes unchanged.
    """
    report = report if report is not None else FillReport()
    if fit_on is not None:
        return fit_plan(fit_on, plan, report).apply(typed, report)
    targets, encoding = _setup(plan, typed)
    work = encoding.encode(typed)
    train = with_derived(work, encoding.kinds)
    filled = work.copy()
    for group in _make_groups(plan, typed, targets, encoding, report):
        # Filling this file only: a column without holes is a feature, not a model to fit
        # (it never changes, so the fill is the same and much cheaper on wide tables).
        joint = [n for n in group.joint if work[n].isna().any()]
        if not any(n in joint for n in group.columns):
            report.methods.update(dict.fromkeys(group.columns, group.method_name))
            continue
        with threadpool_limits(limits=1, user_api="blas"):
            # One BLAS thread: these are many small fits, which threads slow down.
            out = _guarded(group, lambda g=group, j=joint: g.method.fit_transform(train, j))
        for name in group.columns:
            filled[name] = out[name]
            report.methods[name] = group.method_name
    return _finish(plan, encoding, targets, filled, typed, report)


def _make_method(name: str, params: Mapping[str, Any], columns: list[str], seed: int,
                 report: FillReport) -> Any:
    """The plan's method for a group of columns, seeded for the fill."""
    if name not in METHODS:
        raise PlanError(f"plan: column '{columns[0]}' names method '{name}'; "
                        f"choose from: {', '.join(get_method_names())}")
    # A user who edits only "method" leaves the old method's params behind: keep the ones the
    # new method takes and say which were set aside.
    known = METHODS[name]._get_param_names()
    ignored = sorted(set(params) - set(known))
    if ignored:
        report.warnings.append(f"column(s) {', '.join(columns)}: {name} has no parameter "
                               f"{', '.join(ignored)}; ignored")
    try:
        method = get_method(name, **{k: v for k, v in params.items() if k in known})
    except Exception as exc:
        raise PlanError(f"plan: column '{columns[0]}': {exc}") from None
    if "random_state" in method.get_params():
        method.set_params(random_state=derive_seed(seed, "fill", name))
    return method


def fill_table(
    table: Table,
    plan: Plan,
    *,
    fit_on: Table | None = None,
    force: bool = False,
    text_output: bool = True,
) -> tuple[pd.DataFrame, FillReport]:
    """Clean, check and fill a table by a plan.

    Parameters
    ----------
    table : Table
    plan : Plan
    fit_on : Table, optional
        Reference table to fit the methods on; its fingerprint is not checked.
    force : bool
        Proceed past a fingerprint or column mismatch.
    text_output : bool
        For CSV input, return the original text with filled cells rewritten (for CSV output);
        otherwise the typed frame (for Parquet output).

    Returns
    -------
    frame : DataFrame
        Ready to write.
    report : FillReport
    """
    report = FillReport()
    typed, reference = checked_clean(table, plan, report, fit_on=fit_on, force=force)
    planned = [c for c in typed.columns if c in plan.columns]
    filled = fill_frame(typed[planned], plan, fit_on=None if reference is None
                        else reference[planned], report=report)
    return finish_output(table, plan, typed, filled, text_output=text_output), report


def checked_clean(table: Table, plan: Plan, report: FillReport, *, fit_on: Table | None = None,
                  force: bool = False) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """Check a plan against the table (and the ``fit_on`` reference), then clean both.

    Returns
    -------
    typed : DataFrame
        The table cleaned by the plan.
    reference : DataFrame or None
        The reference cleaned by the plan, when given.
    """
    if fit_on is None:
        report.warnings.extend(check_plan(plan, table, force=force))
    else:
        lacking = [c for c in plan.columns if c in table.frame.columns
                   and c not in fit_on.frame.columns]
        if lacking:
            raise DataError(f"{param('fit_on')} '{fit_on.path}' lacks columns "
                            f"{', '.join(lacking)}")
        # The methods are fitted on the reference, which must be the planned file; the file
        # to fill is new by design, so only its columns are checked.
        report.warnings.extend(check_plan(plan, fit_on, force=force))
        report.warnings.extend(check_plan(plan, table, force=True, content=False))
    typed, report.new_tokens = clean_with_plan(table, plan)
    report.warnings.extend(new_token_warnings(report.new_tokens))
    reference = None
    if fit_on is not None:
        reference, _ = clean_with_plan(fit_on, plan)
        missing = [c for c in plan.columns if c in typed.columns and c not in reference.columns]
        if missing:
            raise DataError(f"{param('fit_on')} '{fit_on.path}' lacks columns "
                            f"{', '.join(missing)}")
    return typed, reference


def finish_output(table: Table, plan: Plan, typed: pd.DataFrame, filled: pd.DataFrame, *,
                  text_output: bool = True) -> pd.DataFrame:
    """The filled planned columns with the unplanned ones back in place and the indicators.

    For CSV input with ``text_output``, the original text of every observed cell.
    """
    filled = filled.copy()
    for name in typed.columns:  # unplanned columns pass through in place (with ``force``)
        if name not in plan.columns:
            filled[name] = typed[name]
    filled = filled[[c for c in typed.columns if c in filled.columns]]
    flags = missing_indicators(typed, plan, filled.columns)
    if table.is_text and text_output:
        out = render_text(table, typed, filled, _specs(plan))
        return pd.concat([out, flags.astype("str")], axis=1)
    return pd.concat([filled, flags], axis=1)


def missing_indicators(typed: pd.DataFrame, plan: Plan, columns: Any) -> pd.DataFrame:
    """``NAME__was_missing`` (0/1, int8) for each imputed column whose plan asks for one.

    The flags follow the table's column order and go after all the table's columns, so
    every original column keeps its position.

    Raises
    ------
    PlanError
        If an indicator's name is already a column of the table.
    """
    flags = {}
    for name in typed.columns:
        col = plan.columns.get(name)
        if col is None or not col.indicator or col.action != "impute":
            continue
        flag = f"{name}{INDICATOR_SUFFIX}"
        if flag in typed.columns or flag in columns:
            raise PlanError(f"plan: column '{name}' asks for an indicator, but the table "
                            f"already has a column '{flag}'; rename it or set \"indicator\": "
                            "false")
        flags[flag] = typed[name].isna().astype("int8")
    return pd.DataFrame(flags, index=typed.index)
