"""Multiple imputation: M completed tables whose fills are random draws, not one best guess.

A single fill treats its guesses as data, so every analysis of it is too sure of itself.
Drawing each hole from its method's predictive distribution M times, analysing each completed
table and pooling by Rubin's rules (:func:`imputelab.fill.pooling.pool`) carries the uncertainty
of the fill into the result (Rubin 1987, *Multiple Imputation for Nonresponse in Surveys*).

How each method draws
---------------------
chained-linear
    Bayesian linear regression draws inside every sweep of the chain, so each sweep's
    predictors hold the previous sweep's draws (chained equations, van Buuren &
    Groothuis-Oudshoorn 2011, *J. Stat. Softw.* 45(3)). By default (``refit=True``) the
    chain is re-run for every table and each sweep's models are refitted on the previous
    sweep's draws: proper chained-equations multiple imputation. With ``refit=False`` the
    fitted chain is replayed, drawing from the posteriors of models that were fitted on a
    chain of predicted values (see :func:`draw_datasets`). For a number: the noise
    variance σ*² = σ̂² ν / χ²_ν with ν = n - γ - 1 (γ the Bayesian ridge's effective number
    of parameters; MacKay 1992, *Neural Computation* 4(3), from memory), coefficients
    β* ~ N(coef_, sigma_ · σ*² α̂) (the ridge's posterior, with its penalty held at the
    fitted ratio λ/α), intercept ~ N(ȳ - x̄ᵀβ*, σ*²/n), then y* = xᵀβ* + intercept +
    N(0, σ*²), all on the standardised scale the model was fitted on: the Bayesian linear
    regression draw of Rubin (1987) and van Buuren (2018, *Flexible Imputation of Missing
    Data*, 2nd ed., sec. 3.2; the section numbers of this book are from memory).
    For a label: with ``refit=True`` a logistic model refitted on a bootstrap sample of the
    observed rows (van Buuren 2018, sec. 3.6, bootstrap variant; from memory), otherwise the
    fitted model (no model uncertainty); the label is drawn from its class probabilities.
chained-forest, chained-boosted, knn
    Predictive mean matching (Little 1988, "Missing-data adjustments in large surveys",
    *J. Business & Economic Statistics* 6(3); van Buuren 2018, sec. 3.4): each hole's
    prediction is matched to the predictions of the column's observed cells by the same
    model (the k = 5 nearest), and one of the 5 observed values is drawn at random, so every
    filled value is one seen in the column. Labels are matched on the predicted class
    probabilities (for knn, the neighbours' label shares). The models are not refitted:
    matching on one fitted model ("type 0" in van Buuren's terms, from memory) carries the
    residual spread but not the uncertainty of the model, and its intervals run narrow. So
    the donors are first resampled with replacement for every table and column, the
    approximate Bayesian bootstrap of Rubin & Schenker (1986) applied to the donor pool (the
    combination is ours). On the mean of a MAR normal column (the simulation of
    tests/test_draws.py, M = 20) 95% intervals covered 0.94 (knn), 0.945 (chained-forest)
    and 0.96 (chained-boosted) in 200 replications, against 0.87-0.91 without resampling.
    Every sweep of a chain draws, as for chained-linear without refit.
mean, median, mode
    These have no model; a hole is drawn from the column's observed values by the
    approximate Bayesian bootstrap (Rubin & Schenker 1986, *JASA* 81(394):366-374; from
    memory): bootstrap the observed values, then draw the holes from that bootstrap sample.
    Under MCAR this is a proper draw from the column's distribution; it ignores every other
    column, as the single fill does.
constant
    A chosen value ("blank means none") is not a guess: it is the same in every table.

Donors for matching and the bootstrap are the observed cells of the table being drawn for
(the training table, unless ``fit_on`` names another), and so is the count n in the
intercept's posterior variance of a replayed chained-linear model. Drawn fills go through the same
decoding as a single fill: clipped to the training range, rounded to whole numbers, decimals
or the datetime resolution, labels from the training labels; observed cells never change.
"""

from __future__ import annotations

import json
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import clone
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import BayesianRidge, LogisticRegression
from sklearn.neighbors import NearestNeighbors
from threadpoolctl import ThreadpoolController

from imputelab.checks import check_seed
from imputelab.errors import DataError, OptionError, PlanError, param
from imputelab.fill.frame import (
    FillReport,
    FittedFill,
    _finish,
    _Group,
    _guarded,
    checked_clean,
    finish_output,
    fit_plan,
)
from imputelab.frame.encoding import is_categorical, with_derived
from imputelab.io.tables import Table, write_table
from imputelab.methods.chained import (
    ChainedBoostedFill,
    ChainedForestFill,
    ChainedLinearFill,
    _Constant,
    _Standardised,
)
from imputelab.methods.design import Design
from imputelab.methods.knn import KNNFill
from imputelab.methods.simple import ConstantFill, MeanFill, MedianFill, ModeFill
from imputelab.score.plan import Plan

__all__ = ["DRAW_KINDS", "N_DONORS", "draw_datasets", "iter_draws", "write_draws"]

#: Observed cells a hole's prediction is matched to in predictive mean matching; 5 is the
#: usual choice (van Buuren 2018, sec. 3.4.3; from memory).
N_DONORS = 5

_CHAINED = (ChainedLinearFill, ChainedForestFill, ChainedBoostedFill)
_MARGINAL = (MeanFill, MedianFill, ModeFill)


def draw_datasets(fitted: FittedFill, typed: pd.DataFrame, m: int, *, seed: int,
                  refit: bool = True, report: FillReport | None = None) -> list[pd.DataFrame]:
    """``m`` completed copies of ``typed`` whose fills are random draws.

    Parameters
    ----------
    fitted : FittedFill
        A plan's fitted methods (:func:`imputelab.fill.frame.fit_plan`).
    typed : DataFrame
        Cleaned table to fill (:func:`imputelab.fill.frame.clean_with_plan`).
    m : int
        Number of completed tables.
    seed : int
        Table ``i`` depends only on ``seed`` and ``i``: the same seed gives the same tables,
        and the first tables of a larger ``m`` are those of a smaller one.
    refit : bool, default=True
        Re-run every chained-linear chain on ``typed`` for each table, with draws in every
        sweep and each sweep's models refitted on the previous sweep's draws: proper
        chained-equations multiple imputation, at the cost of one chain fit per table. The
        methods are then fitted on ``typed`` itself, as multiple imputation does; pass
        ``False`` to keep to the models fitted once (a new table filled with a saved
        model). The replayed chain draws in every sweep too, but from models fitted on a
        chain of *predicted* values: exact for a column whose predictors are complete,
        biased toward the single fill's associations between columns that both have holes
        (two correlated columns 40% missing each, 300 rows, 30 replications: drawn
        correlation 0.73, full data 0.63, refitted draws 0.62), and its label draws
        carry no model uncertainty; the report warns. The other methods never refit.
    report : FillReport, optional
        Filled in as by :meth:`FittedFill.apply` (counts per table), plus warnings.

    Returns
    -------
    list of DataFrame
        Each as :meth:`FittedFill.apply` returns it: dropped columns removed, every hole of
        the imputed columns filled, every other cell and every dtype unchanged.

    Raises
    ------
    OptionError
        ``m`` below 1 or a negative ``seed``.
    PlanError
        A method in the plan that has no way to draw.
    DataError
        A column to be drawn by copying observed values that has none in ``typed``.
    """
    return list(iter_draws(fitted, typed, m, seed=seed, refit=refit, report=report))


def iter_draws(fitted: FittedFill, typed: pd.DataFrame, m: int, *, seed: int,
               refit: bool = True, report: FillReport | None = None
               ) -> Iterator[pd.DataFrame]:
    """Yield the tables of :func:`draw_datasets` one at a time (to write each as it comes)."""
    if isinstance(m, bool) or not isinstance(m, int | np.integer) or m < 1:
        raise OptionError(f"the number of drawn tables must be a whole number >= 1, got {m!r}")
    check_seed(seed)
    for group in fitted.groups:
        if not isinstance(group.method, (*_CHAINED, KNNFill, *_MARGINAL, ConstantFill)):
            raise PlanError(f"plan: column '{group.columns[0]}': method {group.method_name} "
                            "cannot draw multiple imputations; choose another method in the "
                            "plan")
    for group in fitted.groups:
        if isinstance(group.method, (ChainedForestFill, ChainedBoostedFill, KNNFill,
                                     *_MARGINAL)):
            drawn = group.joint if isinstance(group.method, _CHAINED) else group.columns
            empty = [n for n in drawn if typed[n].isna().all()]
            if empty:
                raise DataError(f"column '{empty[0]}' has no observed value in this table to "
                                f"draw from ({group.method_name} draws copy observed values)")
    report = report if report is not None else FillReport()
    for group in fitted.groups:
        holed = [n for n in group.joint if typed[n].isna().any()]
        if not refit and isinstance(group.method, ChainedLinearFill) and len(holed) > 1:
            report.warnings.append(
                f"columns {', '.join(holed)}: chained-linear draws replay the fitted chain "
                "(no refit), so associations between columns that both have holes lean "
                "toward the single fill's")
        if isinstance(group.method, ConstantFill):
            report.warnings.append(
                f"columns {', '.join(group.columns)}: filled with a constant, the same in "
                "every drawn table (a chosen value is not a guess to draw)")
    return _iterate(fitted, typed, int(m), int(seed), refit, report)


def _iterate(fitted: FittedFill, typed: pd.DataFrame, m: int, seed: int, refit: bool,
             report: FillReport) -> Iterator[pd.DataFrame]:
    work = fitted.encoding.encode(typed)
    frame = with_derived(work, fitted.encoding.kinds)
    # one BLAS thread, as in FittedFill.apply; the controller is built once (finding the
    # libraries costs milliseconds), and the limit is lifted at every yield
    blas = ThreadpoolController()
    with blas.limit(limits=1, user_api="blas"):
        # knn predictions do not depend on the draws: computed once
        knn = {g: _guarded(group, lambda group=group: _knn_predictions(group, frame))
               for g, group in enumerate(fitted.groups) if isinstance(group.method, KNNFill)}
    for index in range(m):
        filled = work.copy()
        with blas.limit(limits=1, user_api="blas"):
            for g, group in enumerate(fitted.groups):
                rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(index, g)))
                out = _guarded(group, lambda group=group, rng=rng, g=g: _draw_group(
                    group, frame, rng, refit, knn.get(g)))
                for name in group.columns:
                    filled[name] = out[name]
                    report.methods[name] = group.method_name
        yield _finish(fitted.plan, fitted.encoding, fitted.targets, filled, typed,
                      report if index == 0 else FillReport())


def _draw_group(group: _Group, frame: pd.DataFrame, rng: np.random.Generator, refit: bool,
                knn: dict[str, Any] | None) -> pd.DataFrame:
    method = group.method
    if isinstance(method, _CHAINED):
        draw = _ChainDraw(rng, bootstrap=refit and isinstance(method, ChainedLinearFill))
        if refit and isinstance(method, ChainedLinearFill):
            # only columns with holes need a model here; the others still serve as features
            holed = [n for n in group.joint if frame[n].isna().any()]
            if not holed:
                return frame
            return clone(method).fit_transform_with(frame, holed, draw)
        return method.transform_with(frame, draw)
    if isinstance(method, ConstantFill):
        return method.transform(frame)
    out = frame.copy()
    for name in group.columns:
        holes = frame[name].isna().to_numpy()
        if not holes.any():
            continue
        column = out[name].copy()
        observed = _values(frame[name])[~holes]
        if isinstance(method, KNNFill):
            values = knn[name](rng)
        else:
            values = _bayesian_bootstrap(observed, int(holes.sum()), rng)
        out[name] = _put(column, holes, values)
    return out


def _values(column: pd.Series) -> np.ndarray:
    """Numbers, or label codes."""
    if is_categorical(column):
        return column.cat.codes.to_numpy()
    return column.to_numpy(float)


def _put(column: pd.Series, holes: np.ndarray, values: np.ndarray) -> pd.Series:
    if is_categorical(column):
        values = pd.Categorical.from_codes(np.asarray(values, int),
                                           categories=column.cat.categories)
    column.iloc[np.flatnonzero(holes)] = values
    return column


# ----------------------------------------------------------------------- the drawing rules


def _bayesian_bootstrap(observed: np.ndarray, size: int, rng: np.random.Generator) -> np.ndarray:
    """Approximate Bayesian bootstrap (Rubin & Schenker 1986): resample the observed values,
    then draw the holes from the resample."""
    resample = observed[rng.integers(0, len(observed), len(observed))]
    return resample[rng.integers(0, len(resample), size)]


def _match(donor_predictions: np.ndarray, predictions: np.ndarray, k: int,
           rng: np.random.Generator) -> np.ndarray:
    """Index of one of the ``k`` donors whose predictions are nearest each prediction."""
    order = np.argsort(donor_predictions, kind="stable")
    ranked = donor_predictions[order]
    n = len(ranked)
    width = min(2 * k, n)
    # the k nearest of a sorted list lie within k places either side of the insertion point
    start = np.clip(np.searchsorted(ranked, predictions) - k, 0, n - width)
    window = start[:, None] + np.arange(width)
    distance = np.abs(ranked[window] - predictions[:, None])
    nearest = np.argsort(distance, axis=1, kind="stable")[:, :min(k, n)]
    pick = nearest[np.arange(len(predictions)), rng.integers(0, nearest.shape[1],
                                                             len(predictions))]
    return order[window[np.arange(len(predictions)), pick]]


def _matched_draw(donor_predictions: np.ndarray, predictions: np.ndarray, values: np.ndarray,
                  rng: np.random.Generator) -> np.ndarray:
    """Predictive mean matching within a bootstrap sample of the donors.

    ``predictions`` are numbers, or class probabilities (one column per class) for labels:
    matched on the last class's probability for two classes, by Euclidean distance between
    the probability rows for more. Resampling the donors first, as the approximate Bayesian
    bootstrap does (Rubin & Schenker 1986), adds the uncertainty of the donors' distribution
    that matching on one fitted model leaves out.
    """
    sample = rng.integers(0, len(values), len(values))
    donor_predictions = np.asarray(donor_predictions, float)[sample]
    predictions = np.asarray(predictions, float)
    if predictions.ndim == 2 and predictions.shape[1] <= 2:
        donor_predictions, predictions = donor_predictions[:, -1], predictions[:, -1]
    if predictions.ndim == 1:
        return values[sample[_match(donor_predictions, predictions, N_DONORS, rng)]]
    k = min(N_DONORS, len(sample))
    nearest = NearestNeighbors(n_neighbors=k).fit(donor_predictions).kneighbors(
        predictions, return_distance=False)
    pick = nearest[np.arange(len(predictions)), rng.integers(0, k, len(predictions))]
    return values[sample[pick]]


def _draw_label(probabilities: np.ndarray, classes: np.ndarray,
                rng: np.random.Generator) -> np.ndarray:
    probabilities = np.clip(np.asarray(probabilities, float), 0.0, None)
    totals = probabilities.sum(axis=1, keepdims=True)
    probabilities = probabilities / np.where(totals > 0, totals, 1.0)
    cumulative = np.cumsum(probabilities, axis=1)
    cumulative[:, -1] = np.inf  # rounding must not leave a draw above the last class
    chosen = (cumulative > rng.random(len(probabilities))[:, None]).argmax(axis=1)
    return np.asarray(classes)[chosen]


def _posterior_draw(model: _Standardised, features: Any, n: int,
                    rng: np.random.Generator) -> np.ndarray:
    """A draw of y for each row from the Bayesian ridge's posterior predictive (see the module
    docstring); ``n`` is the number of rows the model was fitted on."""
    ridge = model.model
    x = np.asarray(features, float)
    p = x.shape[1]
    # effective number of parameters: gamma = p - lambda tr(Sigma) (MacKay 1992; the same
    # quantity BayesianRidge uses to update alpha)
    gamma = p - ridge.lambda_ * float(np.trace(ridge.sigma_))
    nu = max(n - gamma - 1.0, 1.0)
    noise = (nu / ridge.alpha_) / rng.chisquare(nu)
    values, vectors = np.linalg.eigh(ridge.sigma_ * (noise * ridge.alpha_))
    root = vectors * np.sqrt(np.clip(values, 0.0, None))
    coef = ridge.coef_ + root @ rng.standard_normal(p)
    intercept = (ridge.intercept_ + ridge.X_offset_ @ (ridge.coef_ - coef)
                 + rng.normal(0.0, np.sqrt(noise / max(n, 1))))
    y = x @ coef + intercept + rng.normal(0.0, np.sqrt(noise), len(x))
    return y * model.std_ + model.mean_


class _ChainDraw:
    """The draw a chain calls in place of ``model.predict`` (see ``transform_with``)."""

    def __init__(self, rng: np.random.Generator, bootstrap: bool):
        self.rng = rng
        self.bootstrap = bootstrap

    def __call__(self, model: Any, features: Any, donor_target: np.ndarray,
                 donor_features: Callable[[], Any], categorical: bool) -> np.ndarray:
        rng = self.rng
        size = len(features)
        if isinstance(model, _Constant):
            # one value seen, or no model to learn from: draw from the observed values
            if len(donor_target) == 0:
                return model.predict(features)
            return _bayesian_bootstrap(donor_target, size, rng)
        if isinstance(model, _Standardised) and isinstance(model.model, BayesianRidge):
            return _posterior_draw(model, features, len(donor_target), rng)
        if isinstance(model, LogisticRegression):
            if self.bootstrap:
                model = self._bootstrap_model(model, donor_target, donor_features)
                if isinstance(model, _Constant):
                    return model.predict(features)
            return _draw_label(model.predict_proba(features), model.classes_, rng)
        # tree models: matching on the fitted model, within a bootstrap of the donors
        if categorical:
            return _matched_draw(model.predict_proba(donor_features()),
                                 model.predict_proba(features), donor_target, rng)
        predictions = np.asarray(model.predict(features), float)
        donors = np.asarray(model.predict(donor_features()), float)
        return _matched_draw(donors, predictions, donor_target, rng)

    def _bootstrap_model(self, model: LogisticRegression, target: np.ndarray,
                         donor_features: Callable[[], Any]) -> Any:
        rows = self.rng.integers(0, len(target), len(target))
        sample = target[rows]
        if len(np.unique(sample)) < 2:
            return _Constant(sample[0])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            return clone(model).fit(np.asarray(donor_features())[rows], sample)


def _knn_predictions(group: _Group, frame: pd.DataFrame
                     ) -> dict[str, Callable[[np.random.Generator], np.ndarray]]:
    """Per column of a knn group, a function drawing the column's holes.

    Predictive mean matching on the knn fill (numbers) or the neighbours' label shares
    (labels), where an observed cell's prediction is its knn fill with the cell hidden: the
    row may be among its own neighbours when it is one of the donors, as a model's
    predictions for the rows it was fitted on lean toward their own values.
    """
    method: KNNFill = group.method
    design = Design(frame, "onehot", method.stats_, method.keep_)
    slices = design.slices()
    matrix = design.matrix()
    out = {}
    for name in group.columns:
        holes = frame[name].isna().to_numpy()
        if not holes.any():
            continue
        where = slices[name]
        hidden = matrix.copy()
        hidden[:, where] = np.nan
        predicted = method.imputer_.transform(hidden)[:, where]
        if not is_categorical(frame[name]):
            mean, std = method.stats_[name]
            predicted = predicted[:, 0] * std + mean
        # labels: the neighbours' one-hot shares (all 0 where every neighbour holds a rare
        # label outside the design: such holes match donors that hold rare labels too)
        out[name] = (lambda rng, d=predicted[~holes], h=predicted[holes],
                     v=_values(frame[name])[~holes]: _matched_draw(d, h, v, rng))
    return out


def write_draws(
    table: Table,
    plan: Plan,
    m: int,
    out_dir: str | Path,
    *,
    fit_on: Table | None = None,
    force: bool = False,
    progress: Callable[[int, int], None] | None = None,
) -> tuple[list[Path], FillReport, dict[str, Any]]:
    """Write ``m`` completed copies of a table, each filled with fresh random draws.

    The table is checked and cleaned as :func:`~imputelab.fill.frame.fill_table` does; the plan's
    methods are fitted on it (proper chained-equations draws, ``refit=True``) or, with
    ``fit_on``, on the reference and then replayed on the table (``refit=False``). File ``i``
    is ``out_dir/<stem>_draw<i>.<ext>`` in the table's own format, with the plan's indicator
    columns; ``out_dir/draws.json`` records how each column was drawn.

    Returns
    -------
    paths : list of Path
    report : FillReport
    info : dict
        The content of ``draws.json``.
    """
    report = FillReport()
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise OptionError(f"{param('out')} '{out_dir}' is a file; with {param('draws')} it must be "
                          "a folder")
    typed, reference = checked_clean(table, plan, report, fit_on=fit_on, force=force)
    planned = [c for c in typed.columns if c in plan.columns]
    fitted = fit_plan(typed[planned] if reference is None else reference[planned], plan, report)
    seed = int(plan.settings.get("seed", 0))
    out_dir.mkdir(parents=True, exist_ok=True)
    width = max(2, len(str(m)))
    paths = []
    for i, filled in enumerate(iter_draws(fitted, typed[planned], m, seed=seed,
                                          refit=reference is None, report=report), start=1):
        frame = finish_output(table, plan, typed, filled, text_output=table.is_text)
        path = out_dir / f"{table.path.stem}_draw{i:0{width}d}{table.path.suffix}"
        paths.append(write_table(frame, path, delimiter=table.delimiter))
        if progress is not None:
            progress(i, m)
    info = {
        "format": "imputelab-draws",
        "version": 1,
        "source": table.path.name,
        "fingerprint": f"sha256:{table.fingerprint}",
        "m": m,
        "seed": seed,
        "refit": reference is None,
        "files": [p.name for p in paths],
        "methods": {g.method_name: {"columns": list(g.columns),
                                    "draws": DRAW_KINDS.get(g.method_name, "")}
                    for g in fitted.groups},
        "warnings": list(report.warnings),
        "pooling": "analyse each file, then combine with imputelab.pool (Rubin's rules)",
    }
    (out_dir / "draws.json").write_text(json.dumps(info, indent=2) + "\n", encoding="utf-8")
    return paths, report, info


#: How each method draws (written to draws.json).
DRAW_KINDS = {
    "chained-linear": "posterior draws: Bayesian ridge coefficients and noise for numbers, a "
                      "bootstrapped logistic model for labels, in every sweep",
    "chained-forest": "predictive mean matching: one of the 5 observed donors nearest in "
                      "prediction",
    "chained-boosted": "predictive mean matching: one of the 5 observed donors nearest in "
                       "prediction",
    "knn": "predictive mean matching on the neighbours' prediction",
    "mean": "approximate Bayesian bootstrap of the observed values (proper under MCAR only)",
    "median": "approximate Bayesian bootstrap of the observed values (proper under MCAR only)",
    "mode": "approximate Bayesian bootstrap of the observed values (proper under MCAR only)",
    "constant": "the same constant in every file (no uncertainty)",
}
