"""``PlanImputer``: a plan's fill as a scikit-learn transformer.

``fit`` learns on the training rows only: with a plan, it reads the rows by the plan's
cleaning and fits the plan's methods (:func:`imputelab.fill.frame.fit_plan`); with no plan, it first
scores the candidate methods on those rows and chooses one per column
(:func:`imputelab.score.build.score_table`). ``transform`` fills any rows with the fitted methods,
without refitting, so it can sit in a :class:`sklearn.pipeline.Pipeline` under cross-validation
and never learn from a held-out fold.

Input is a pandas DataFrame (numeric, ``str``, ``category``, ``bool`` and datetime columns) or
a 2-D array. An array's columns are named ``x0``, ``x1``, ... inside (and in a plan made for
it). Object columns are read as numbers when every value is one, otherwise as text labels.
"""

from __future__ import annotations

import copy
import numbers
import os
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils import Tags, check_random_state
from sklearn.utils._set_output import _get_output_config
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted, validate_data

from imputelab.checks import check_count, check_seed, check_share
from imputelab.errors import ImputelabWarning, OptionError, PlanError, param
from imputelab.fill.frame import (
    FillReport,
    clean_with_plan,
    column_differences,
    fit_plan,
    missing_indicators,
)
from imputelab.fill.text import render_text
from imputelab.io.columns import INDICATOR_SUFFIX, ColumnSpec, infer_spec, new_token_warnings
from imputelab.io.tables import Table
from imputelab.masks import get_mask_names
from imputelab.methods import METHODS, get_method_names
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.plan import Plan
from imputelab.survey.table import SurveyOptions

__all__ = ["PlanImputer"]

# What a column holds, for telling a changed input apart from new values of the same sort.
_NUMBER, _TEXT, _LABEL, _STAMP = "numbers", "text", "category", "timestamps"


def _family(dtype: Any) -> str:
    if isinstance(dtype, pd.CategoricalDtype):
        return _LABEL
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return _STAMP
    if pd.api.types.is_string_dtype(dtype):
        return _TEXT
    return _NUMBER


def _is_text(dtype: Any) -> bool:
    return _family(dtype) == _TEXT


_NUMBER_INFERRED = frozenset({"integer", "floating", "mixed-integer-float", "decimal",
                              "boolean", "empty"})


def _read_objects(column: pd.Series) -> pd.Series:
    """An object column as numbers when every value is one, otherwise as text labels."""
    if pd.api.types.infer_dtype(column, skipna=True) in _NUMBER_INFERRED:
        return pd.to_numeric(column, errors="coerce").astype(float)
    # Any other object (a dict, a mix of numbers and words) is read through its text, as a
    # CSV file would hold it.
    return column.map(str, na_action="ignore").astype("str")


def _check_column(name: str, column: pd.Series) -> None:
    dtype = column.dtype
    if isinstance(dtype, pd.CategoricalDtype) or pd.api.types.is_string_dtype(dtype):
        return
    if pd.api.types.is_datetime64_any_dtype(dtype) or pd.api.types.is_bool_dtype(dtype):
        return
    if pd.api.types.is_complex_dtype(dtype) or not pd.api.types.is_numeric_dtype(dtype):
        raise ValueError(f"column '{name}' has dtype {dtype}, which PlanImputer does not read; "
                         "give numbers, text (str), category, bool or datetime columns")
    values = column.to_numpy(float, na_value=np.nan)
    if np.isinf(values).any():
        raise ValueError(f"Input X contains infinity in column '{name}'; PlanImputer fills "
                         "missing values (NaN), not infinite ones: replace them first")


class PlanImputer(TransformerMixin, BaseEstimator):
    """Fill missing values by an imputelab plan, inside scikit-learn.

    Parameters
    ----------
    plan : Plan, path-like or None, default=None
        The plan to follow, or the path of a ``plan.json`` (read in ``fit``). Its columns
        must be the columns of ``X`` (``x0``, ``x1``, ... for an array); the plan's target
        column may be absent. With ``None``, ``fit`` scores the candidate methods on the
        training rows and makes the plan there.
    methods : sequence of str, optional
        Candidate methods when there is no plan (all registered methods by default).
    masks : sequence of str, optional
        Masks of the scoring experiment when there is no plan (the ``score`` default).
    repeats : int, default=3
        Draws per mask when there is no plan.
    rate : float, default=0.2
        Share of each column's observed cells hidden per draw when there is no plan.
    diagnostics : bool, default=False
        When there is no plan, also gather the survey's evidence about the blanks (Little's
        test, the predictability of each column's blanks, structural rules: a column blank
        only where it does not apply gets a constant fill and an indicator column). It costs
        tens of seconds on a few hundred rows, so it is off by default.
    n_jobs : int, optional
        Parallel jobs of the scoring experiment (1 by default).
    random_state : int, RandomState instance or None, default=None
        Seed of every fill method and of the scoring experiment. When given it overrides the
        plan's seed; with ``None`` the plan's own seed is used (0 when there is no plan), so
        the result is deterministic either way.

    Attributes
    ----------
    plan_ : Plan
        The plan that was fitted: the given one (with the seed in use) or the one chosen on
        the training rows.
    fitted_ : FittedFill
        The plan's methods fitted on the training rows.
    n_features_in_ : int
        Number of columns seen in ``fit``.
    feature_names_in_ : ndarray of str
        Column names seen in ``fit`` (only for a DataFrame with string column names).

    Notes
    -----
    Output columns: the input's, without the columns the plan drops (``action: drop``; with
    no plan, columns more than half missing), followed by ``NAME__was_missing`` (0/1) for each
    column whose plan sets ``indicator: true``; see :meth:`get_feature_names_out`. Text and
    identifier columns are passed through unchanged (their holes stay missing).

    ``transform`` returns an ndarray by default (``float64`` when every output column is
    numeric, ``object`` otherwise) and, after ``set_output(transform="pandas")``, a DataFrame
    with the input's index in which every column keeps its input dtype. Observed cells are
    returned as given, except cells the plan reads as missing (tokens such as ``"n/a"`` in a
    text column, confirmed missing codes), which are filled.

    Examples
    --------
    >>> import numpy as np
    >>> from imputelab.score.plan import ColumnPlan, Plan
    >>> plan = Plan(source={}, settings={"seed": 0}, columns={
    ...     "x0": ColumnPlan(kind="numeric", missing_fraction=0.5, action="impute",
    ...                      method="mean")})
    >>> PlanImputer(plan=plan).fit_transform(np.array([[1.5], [np.nan], [2.5]])).ravel()
    array([1.5, 2. , 2.5])
    """

    def __init__(
        self,
        plan: Plan | str | os.PathLike[str] | None = None,
        *,
        methods: Sequence[str] | None = None,
        masks: Sequence[str] | None = None,
        repeats: int = 3,
        rate: float = 0.2,
        diagnostics: bool = False,
        n_jobs: int | None = None,
        random_state: int | np.random.RandomState | None = None,
    ) -> None:
        self.plan = plan
        self.methods = methods
        self.masks = masks
        self.repeats = repeats
        self.rate = rate
        self.diagnostics = diagnostics
        self.n_jobs = n_jobs
        self.random_state = random_state

    def __sklearn_tags__(self) -> Tags:
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        # Labels come in as pandas str or category columns (and object arrays of them).
        tags.input_tags.string = True
        tags.input_tags.categorical = True
        return tags

    # ----------------------------------------------------------------------------- fit

    def fit(self, X: Any, y: Any = None) -> PlanImputer:
        """Learn the fill from the training rows ``X`` only.

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
        y : ignored
            Not used; the target stays outside the imputer (a plan's target column may be
            absent from ``X``).

        Returns
        -------
        self : PlanImputer

        Raises
        ------
        ValueError
            Malformed input or parameters.
        PlanError
            The plan cannot be read or does not match the columns of ``X``.
        DataError
            The plan cannot be fitted on these rows (a column with nothing observed).
        """
        seed = self._seed()
        frame, _ = self._frame(X, reset=True)
        table = Table(frame, Path("<DataFrame>" if hasattr(X, "iloc") else "<array>"),
                      "parquet")
        if self.plan is None:
            plan = self._score(table, 0 if seed is None else seed)
        else:
            plan = self._given_plan(list(frame.columns))
            if seed is not None:
                plan.settings["seed"] = seed
        typed, new_tokens = _clean(table, plan)
        _warn_tokens(new_tokens)
        report = FillReport()
        fitted = fit_plan(typed, plan, report)
        for message in report.warnings:
            warnings.warn(message, ImputelabWarning, stacklevel=2)
        self.plan_ = plan
        self.fitted_ = fitted
        self._families = {name: _family(frame[name].dtype) for name in frame.columns}
        return self

    def _seed(self) -> int | None:
        state = self.random_state
        if state is None:
            return None
        if isinstance(state, numbers.Integral) and not isinstance(state, bool):
            return _checked(check_seed, state, "random_state")
        if isinstance(state, np.random.RandomState):
            return int(check_random_state(state).randint(np.iinfo(np.int32).max))
        raise ValueError(f"PlanImputer(random_state={state!r}): give an int, a RandomState or "
                         "None")

    def _given_plan(self, names: list[str]) -> Plan:
        if isinstance(self.plan, Plan):
            plan = copy.deepcopy(self.plan)  # the parameter is never changed by fit
        elif isinstance(self.plan, str | os.PathLike):
            plan = Plan.load(self.plan, option="PlanImputer(plan=...)")
        else:
            raise TypeError(f"PlanImputer(plan=...) must be a Plan, the path of a plan file "
                            f"or None, not {type(self.plan).__name__}")
        if plan.settings.get("use_target"):
            raise PlanError("the plan fills with its target column as a feature "
                            "(use_target), which transform never sees; score without "
                            f"{param('use_target')}")
        for col in plan.columns.values():
            # A plan written by hand may say only the kind; the cleaning then reads the
            # cells with that kind's defaults.
            col.cleaning = {"kind": col.kind, **(col.cleaning or {})}
        target = plan.settings.get("target")
        if target in plan.columns and target not in names:
            del plan.columns[target]  # the target stays outside X in a pipeline
        differences = column_differences(list(plan.columns), names,
                                         lacking="planned but not in X",
                                         extra="in X but not in the plan")
        if differences:
            raise PlanError(f"the plan's columns do not match X ({differences}); "
                            "make the plan from data with these columns (x0, x1, ... for an "
                            "array)")
        return plan

    def _score(self, table: Table, seed: int) -> Plan:
        methods = self._names(self.methods, "methods", METHODS)
        masks = self._names(self.masks, "masks", get_mask_names())
        repeats = _checked(check_count, self.repeats, "repeats")
        rate = _checked(check_share, self.rate, "rate")
        jobs = 1 if self.n_jobs is None else self.n_jobs
        if not isinstance(jobs, numbers.Integral) or jobs == 0:
            raise ValueError(f"PlanImputer(n_jobs={self.n_jobs!r}): give a non-zero whole "
                             "number or None")
        survey = SurveyOptions(kinds=_kind_overrides(table.frame),
                               diagnostics=bool(self.diagnostics), seed=seed)
        options = ScoreOptions(survey=survey, masks=masks, rate=rate,
                               repeats=repeats, seed=seed, methods=methods,
                               n_jobs=int(jobs))
        plan, _, _ = score_table(table, options)
        return plan

    @staticmethod
    def _names(value: Sequence[str] | None, param: str, known: Any) -> list[str] | None:
        if value is None:
            return None
        names = [value] if isinstance(value, str) else list(value)
        if not names:
            raise ValueError(f"PlanImputer({param}=[]): give at least one name, or None")
        for name in names:
            if name not in known:
                choices = get_method_names() if param == "methods" else known
                raise ValueError(f"PlanImputer({param}=...): unknown name {name!r}; choose "
                                 f"from: {', '.join(choices)}")
        return names

    # ------------------------------------------------------------------------ transform

    def transform(self, X: Any) -> Any:
        """Fill the holes of ``X`` with the methods fitted in ``fit`` (no refitting).

        Parameters
        ----------
        X : DataFrame or array-like of shape (n_samples, n_features)
            The same columns as in ``fit``.

        Returns
        -------
        ndarray or DataFrame of shape (n_samples, n_features_out)
            See the class notes for the columns and the container.
        """
        check_is_fitted(self)
        frame, original = self._frame(X, reset=False)
        changed = [n for n in frame.columns if _family(frame[n].dtype) != self._families[n]]
        if changed:
            shown = ", ".join(f"'{n}' ({self._families[n]} in fit, "
                              f"{_family(frame[n].dtype)} now)" for n in changed)
            raise ValueError(f"X holds another sort of values than in fit in column(s) "
                             f"{shown}; give the columns as they were in fit")
        table = Table(frame, Path("<DataFrame>" if hasattr(X, "iloc") else "<array>"),
                      "parquet")
        typed, new_tokens = _clean(table, self.plan_)
        _warn_tokens(new_tokens)
        filled = self.fitted_.apply(typed)
        out = _restore(filled, typed, frame, original, self.plan_)
        flags = missing_indicators(typed, self.plan_, out.columns)
        out = pd.concat([out, flags], axis=1)
        if _get_output_config("transform", self)["dense"] == "pandas":
            return out
        # The default container is an array, as scikit-learn's own transformers give.
        if all(pd.api.types.is_numeric_dtype(d) for d in out.dtypes):
            return out.to_numpy(dtype=np.float64, na_value=np.nan)
        return out.to_numpy(dtype=object)

    def get_feature_names_out(self, input_features: Any = None) -> np.ndarray:
        """Names of the output columns.

        The input names without the dropped columns, then ``NAME__was_missing`` for every
        column whose plan sets an indicator. Not one-to-one, so it is written out here rather
        than taken from :class:`sklearn.base.OneToOneFeatureMixin`.

        Parameters
        ----------
        input_features : array-like of str, optional
            Input names; by default ``feature_names_in_`` (``x0``, ``x1``, ... for arrays).

        Returns
        -------
        ndarray of str
        """
        check_is_fitted(self)
        given = list(_check_feature_names_in(self, input_features))
        columns = self.plan_.columns
        inner = self._inner_names()
        kept = [given[i] for i, n in enumerate(inner) if columns[n].action != "drop"]
        flagged = [f"{given[i]}{INDICATOR_SUFFIX}" for i, n in enumerate(inner)
                   if columns[n].indicator and columns[n].action == "impute"]
        return np.asarray(kept + flagged, dtype=object)

    # --------------------------------------------------------------------------- input

    def _inner_names(self) -> list[str]:
        if hasattr(self, "feature_names_in_"):
            return [str(n) for n in self.feature_names_in_]
        return [f"x{i}" for i in range(self.n_features_in_)]

    def _frame(self, X: Any, *, reset: bool) -> tuple[pd.DataFrame, pd.DataFrame]:
        """``X`` as a frame named like the plan, and as given (dtypes to give back).

        The first has object columns read as numbers or text; both have the inner names.
        """
        if isinstance(X, pd.DataFrame):
            # skip_check_array keeps every column's dtype; the checks an array would get
            # (empty input, infinity) are made below.
            validate_data(self, X, skip_check_array=True, reset=reset)
            if X.shape[1] == 0:
                raise ValueError(f"0 feature(s) (shape={X.shape}) while a minimum of 1 is "
                                 "required by PlanImputer.")
            if X.shape[0] == 0:
                raise ValueError(f"Found array with 0 sample(s) (shape={X.shape}) while a "
                                 "minimum of 1 is required by PlanImputer.")
            original = X
        else:
            array = validate_data(self, X, dtype=None, ensure_all_finite="allow-nan",
                                  reset=reset)
            if array.dtype.kind in "biuf":
                array = array.astype(np.float64, copy=False)
            elif array.dtype.kind not in "OUSM":
                raise ValueError(f"X has dtype {array.dtype}, which PlanImputer does not "
                                 "read; give numbers, or a DataFrame of labelled columns")
            original = pd.DataFrame(array)
        original = original.set_axis(self._inner_names(), axis=1)
        frame = original.copy(deep=False)
        for name in frame.columns:
            if pd.api.types.is_object_dtype(frame[name].dtype):
                frame[name] = _read_objects(frame[name])
            _check_column(name, frame[name])
        return frame, original


def _checked(check: Callable[..., Any], value: Any, name: str) -> Any:
    """A parameter check of :mod:`imputelab.checks`, failing as scikit-learn estimators fail."""
    try:
        return check(value, name)
    except OptionError as exc:
        raise ValueError(f"PlanImputer: {exc}") from None


def _kind_overrides(frame: pd.DataFrame) -> dict[str, str]:
    """Number columns the survey would call identifiers are features here: keep them numeric.

    A unique whole number per row is a row key in a file; in a model's design matrix it is a
    feature that may have holes at transform time, and an identifier is never filled.
    """
    out = {}
    for name in frame.columns:
        column = frame[name]
        if (pd.api.types.is_numeric_dtype(column.dtype)
                and not pd.api.types.is_bool_dtype(column.dtype)
                and infer_spec(column).kind == "identifier"):
            out[name] = "numeric"
    return out


def _clean(table: Table, plan: Plan) -> tuple[pd.DataFrame, dict[str, dict[str, int]]]:
    """:func:`clean_with_plan`, with float label columns held as objects while filled.

    A 0/1 float column is a binary column; the fill writes its labels back as objects, which
    pandas 3 refuses in a float column (``Encoding.decode``). As objects they fill; the
    output gets the float dtype back in :func:`_restore`.
    """
    typed, new_tokens = clean_with_plan(table, plan)
    for name in typed.columns:
        col = plan.columns.get(name)
        if (col is not None and col.kind in ("binary", "categorical")
                and pd.api.types.is_float_dtype(typed[name].dtype)):
            typed[name] = typed[name].astype(object)
    return typed, new_tokens


def _specs(plan: Plan) -> dict[str, ColumnSpec]:
    out = {}
    for name, col in plan.columns.items():
        spec = ColumnSpec.from_dict(col.cleaning or {})
        spec.kind = col.kind  # a user's edit of the kind wins, as in fill
        out[name] = spec
    return out


def _restore(filled: pd.DataFrame, typed: pd.DataFrame, frame: pd.DataFrame,
             original: pd.DataFrame, plan: Plan) -> pd.DataFrame:
    """Give every filled column back the dtype it came in with.

    Text columns the plan reads as numbers or timestamps are written back as text, observed
    cells as they were and filled ones like the column (as a CSV fill writes them).
    """
    out = filled.copy()
    text = [n for n in filled.columns if _is_text(frame[n].dtype)]
    if text:
        sub = Table(frame[text], Path("<DataFrame>"), "parquet")
        out[text] = render_text(sub, typed[text], filled[text], _specs(plan))
    for name in filled.columns:
        want = original[name].dtype
        if out[name].dtype == want:
            continue
        try:
            out[name] = out[name].astype(want)
        except (TypeError, ValueError) as exc:
            raise ValueError(
                f"column '{name}': the plan reads it as {plan.columns[name].kind} values of "
                f"dtype {typed[name].dtype}, which its dtype {want} cannot hold ({exc}); "
                "convert the column or use a plan made from data of this dtype") from None
    return out


def _warn_tokens(new_tokens: dict[str, dict[str, int]]) -> None:
    for line in new_token_warnings(new_tokens):
        warnings.warn(line, ImputelabWarning, stacklevel=3)
