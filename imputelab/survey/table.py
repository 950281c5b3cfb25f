"""The survey: what every column is, how much of it is missing, and what hides as a value."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from imputelab.checks import check_count, check_seed, check_share
from imputelab.errors import DataError, param
from imputelab.executors.pool import Executor
from imputelab.io.columns import (
    IMPUTABLE_KINDS,
    ColumnSpec,
    blank_mask,
    clean_column,
    infer_spec,
    numeric_codes,
    observed_numbers,
    parse_numbers,
    suspected_codes,
)
from imputelab.io.tables import Table
from imputelab.survey.diagnostics import CAUTION
from imputelab.survey.evidence import Evidence, gather_evidence

__all__ = ["ColumnSurvey", "Survey", "SurveyOptions", "check_columns", "survey_table"]

DEFAULT_DROP_THRESHOLD = 0.5  # common practice, no source


def check_columns(names: Sequence[str], columns: Sequence[str], parameter: str) -> None:
    """Raise a :class:`DataError` naming ``parameter`` when a name is not a column.

    ``parameter`` is the name of the setting that named the columns (``"kinds"``); the
    message marks it with :func:`imputelab.errors.param`.
    """
    known = set(columns)
    for name in names:
        if name not in known:
            shown = ", ".join(list(columns)[:20]) + (", ..." if len(columns) > 20 else "")
            raise DataError(f"{param(parameter)}: column '{name}' not found; "
                            f"columns are: {shown}")


@dataclass
class SurveyOptions:
    """What the user told the survey.

    Attributes
    ----------
    kinds : dict
        Kind overrides, column to kind.
    missing_codes : dict
        Confirmed missing codes, a list per column.
    date_formats : dict
        ``strptime`` formats, column to format.
    drop_threshold : float
        Columns missing more than this share are flagged for dropping.
    target : str, optional
        The column a later model will predict.
    diagnostics : bool
        Gather the evidence about what the blanks mean (:mod:`imputelab.survey.evidence`): Little's
        test, the pattern table, the predictability of every column's blanks, structural
        rules. Off, the survey is only kinds, counts, tokens and codes.
    n_jobs : int
        Columns checked in parallel by the diagnostics, in local processes, when no
        ``executor`` is given.
    seed : int
        Seed of the diagnostics' classifiers.
    executor : Executor, optional
        Where the diagnostics' per-column checks run (:mod:`imputelab.executors.pool`: this
        process, local processes or a Dask cluster, as the ``n_jobs`` and ``cluster``
        settings give it); by default ``n_jobs`` local processes. The survey does not
        depend on it. Not compared and not shown: it says where, not what.
    """

    kinds: dict[str, str] = field(default_factory=dict)
    missing_codes: dict[str, list[Any]] = field(default_factory=dict)
    date_formats: dict[str, str] = field(default_factory=dict)
    drop_threshold: float = DEFAULT_DROP_THRESHOLD
    target: str | None = None
    diagnostics: bool = True
    n_jobs: int = 1
    seed: int = 0
    executor: Executor | None = field(default=None, compare=False, repr=False)

    def validate(self, columns: Sequence[str]) -> None:
        """Check every named column exists and values are in range."""
        check_columns(self.kinds, columns, "kinds")
        check_columns(self.missing_codes, columns, "missing_codes")
        check_columns(self.date_formats, columns, "date_formats")
        if self.target is not None:
            check_columns([self.target], columns, "target")
        check_share(self.drop_threshold, "drop_threshold", closed=True)
        check_count(self.n_jobs, "n_jobs")
        check_seed(self.seed)


@dataclass
class ColumnSurvey:
    """Survey of one column."""

    name: str
    spec: ColumnSpec
    missing: int
    missing_fraction: float
    suspected_codes: list[float]
    drop: bool
    notes: list[str] = field(default_factory=list)
    evidence: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict (the keys of the survey's JSON output)."""
        return {**self._basics(), **self.evidence}

    def _basics(self) -> dict[str, Any]:
        return {
            "kind": self.spec.kind,
            "missing": self.missing,
            "missing_fraction": round(self.missing_fraction, 6),
            "tokens": dict(self.spec.tokens),
            "suspected_codes": [_plain(v) for v in self.suspected_codes],
            "missing_codes": [_plain(v) for v in self.spec.missing_codes],
            "drop": self.drop,
            "date_format": self.spec.date_format,
            "notes": list(self.notes),
        }


def _plain(value: Any) -> Any:
    if isinstance(value, float) and value.is_integer():
        return int(value)
    return value


@dataclass
class Survey:
    """Survey of a table: per-column results and the cleaned (typed) frame."""

    table: Table
    options: SurveyOptions
    columns: dict[str, ColumnSurvey]
    typed: pd.DataFrame
    evidence: Evidence | None = None

    @property
    def rows(self) -> int:
        """Number of rows."""
        return len(self.typed)

    @property
    def specs(self) -> dict[str, ColumnSpec]:
        """Cleaning spec per column."""
        return {name: col.spec for name, col in self.columns.items()}

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict (the survey's JSON output)."""
        out: dict[str, Any] = {
            "file": str(self.table.path),
            "rows": self.rows,
            "columns": {name: col.to_dict() for name, col in self.columns.items()},
            "drop_threshold": self.options.drop_threshold,
            "format": self.table.format,
            "delimiter": self.table.delimiter,
            "decimal": self.table.decimal,
        }
        if self.options.target is not None:
            out["target"] = self.options.target
            out["target_missing_rows"] = int(self.typed[self.options.target].isna().sum())
        if self.evidence is not None:
            out.update(self.evidence.table_dict())
            out["caution"] = CAUTION
        return out


def survey_table(table: Table, options: SurveyOptions | None = None) -> Survey:
    """Survey every column of a table.

    Parameters
    ----------
    table : Table
        As read by :func:`imputelab.io.tables.read_table`.
    options : SurveyOptions, optional

    Returns
    -------
    Survey

    Examples
    --------
    >>> import pandas as pd
    >>> from pathlib import Path
    >>> t = Table(pd.DataFrame({"a": ["1", "n/a", "3"]}, dtype="str"), Path("t.csv"), "csv")
    >>> survey_table(t).columns["a"].spec.tokens
    {'n/a': 1}
    """
    options = options or SurveyOptions()
    frame = table.frame
    options.validate(list(frame.columns))
    columns: dict[str, ColumnSurvey] = {}
    typed = {}
    n = len(frame)
    for name in frame.columns:
        raw = frame[name]
        spec = infer_spec(
            raw,
            decimal=table.decimal,
            kind=options.kinds.get(name),
            date_format=options.date_formats.get(name),
            missing_codes=options.missing_codes.get(name),
        )
        values, _ = clean_column(raw, spec, decimal=table.decimal)
        typed[name] = values
        columns[name] = _column_survey(name, raw, values, spec, table.decimal, options)
    typed_frame = pd.DataFrame(typed, index=frame.index)
    evidence = None
    if options.diagnostics:
        evidence = gather_evidence(typed_frame, {n: c.spec for n, c in columns.items()},
                                   seed=options.seed, n_jobs=options.n_jobs,
                                   target=options.target, executor=options.executor)
        for col in columns.values():
            _add_evidence(col, evidence, n, options)
    return Survey(table=table, options=options, columns=columns, typed=typed_frame,
                  evidence=evidence)


def _column_survey(name: str, raw: pd.Series, values: pd.Series, spec: ColumnSpec,
                   decimal: str, options: SurveyOptions) -> ColumnSurvey:
    """One column's counts, suspected codes, drop flag and notes."""
    n = len(raw)
    notes = []
    if spec.kind in ("text", "identifier"):
        missing = int(blank_mask(raw).sum())
        notes.append("passed through")
    else:
        missing = int(values.isna().sum())
    codes: list[float] = []
    observed = (observed_numbers(values, decimal=decimal)
                if spec.kind in ("numeric", "binary") else None)
    if observed is not None:
        confirmed = set(numeric_codes(spec.missing_codes))
        codes = [c for c in suspected_codes(observed) if c not in confirmed]
        for code in codes:
            count = int(np.sum(observed == code))
            notes.append(f"{_plain(code)} x{count} at the edge of the range: a code? "
                         f"{param('missing_codes')} {name}={_plain(code)}")
    if spec.ambiguous_formats:
        notes.append(
            f"dates read as {spec.date_format} but {', '.join(spec.ambiguous_formats)} also "
            f"fits every value; set it with {param('date_formats')} {name}=FORMAT"
        )
    fraction = missing / n if n else 0.0
    if missing == n:
        notes.append("every cell is missing")
    elif spec.kind in IMPUTABLE_KINDS and values.dropna().nunique() == 1:
        notes.append("a single distinct value: methods that need variance are skipped")
    notes.extend(_code_notes(raw, spec, decimal))
    if spec.kind in ("text", "categorical") and spec.kind_source == "inferred":
        share = _number_share(raw, decimal)
        if share >= 0.5:
            notes.append(f"{share:.0%} of its cells are numbers; if it is numeric, say "
                         f"{param('kinds')} {name}=numeric")
    drop = fraction > options.drop_threshold and name != options.target
    return ColumnSurvey(name, spec, missing, fraction, codes, drop, notes)


def _code_notes(raw: pd.Series, spec: ColumnSpec, decimal: str) -> list[str]:
    """The confirmed codes, and those of them the column does not hold."""
    if not spec.missing_codes:
        return []
    notes = [f"missing codes: {', '.join(str(_plain(c)) for c in spec.missing_codes)}"]
    absent = _absent_codes(raw, spec, decimal)
    if absent:
        notes.append(f"{param('missing_codes')} {', '.join(str(_plain(c)) for c in absent)} "
                     "not found in this column")
    return notes


def _add_evidence(col: ColumnSurvey, evidence: Evidence, n: int, options: SurveyOptions) -> None:
    """Attach a column's evidence; structural blanks do not count towards dropping it."""
    col.evidence = evidence.column_dict(col.name)
    rules = evidence.structural.get(col.name)
    if rules:
        rule = rules[0]
        col.notes.append(f"blank when {rule.when} ({rule.support} rows, {rule.confidence:.0%} "
                         f"of them): not applicable, not missing")
        # Common practice, no source: the drop threshold applies to the values that are
        # really missing, so a column blank only where it does not apply is kept.
        col.drop = (rule.unexplained / n if n else 0.0) > options.drop_threshold and (
            col.name != options.target)
    hint = evidence.zero_hints.get(col.name)
    if hint is not None:
        col.notes.append(hint.text)


def _absent_codes(raw: pd.Series, spec: ColumnSpec, decimal: str) -> list[Any]:
    text = raw.astype("str").str.strip()
    numbers = set(parse_numbers(text, decimal).dropna().tolist())
    labels = set(text.tolist())
    absent = []
    for code in spec.missing_codes:
        number = numeric_codes([code])
        if (number and number[0] in numbers) or str(code).strip() in labels:
            continue
        absent.append(code)
    return absent


def _number_share(raw: pd.Series, decimal: str) -> float:
    if not pd.api.types.is_string_dtype(raw.dtype):
        return 0.0
    present = raw[raw.str.strip() != ""]
    if not len(present):
        return 0.0
    return float(parse_numbers(present, decimal).notna().mean())


