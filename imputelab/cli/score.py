"""``imputelab score FILE --out plan.json``."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Annotated, Any

import typer
from rich import box
from rich.table import Table as RichTable

from imputelab.cli._common import (
    check_output,
    handle_errors,
    out,
    parse_list,
    print_json,
    progress_bar,
)
from imputelab.cli._flags import as_flags
from imputelab.cli._options import (
    ClusterOpt,
    FileArg,
    JsonOpt,
    QuietOpt,
    reading_options,
    survey_options,
)
from imputelab.cli.report import report_line
from imputelab.errors import OptionError
from imputelab.executors.pool import open_executor
from imputelab.io.tables import read_table
from imputelab.metrics.scores import PRIMARY, get_metric
from imputelab.report.page import write_report
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.plan import Plan

SHORT = {"constant": "const", "chained-linear": "linear", "chained-forest": "forest",
         "chained-boosted": "boosted"}


def plan_rich_table(plan: Plan) -> RichTable:
    """The plan's decisions and reasons, as a terminal table."""
    table = RichTable(title="Plan", title_justify="left")
    table.add_column("column", no_wrap=True)
    table.add_column("action")
    table.add_column("method")
    table.add_column("why", overflow="fold", ratio=1)
    for name, col in plan.columns.items():
        table.add_row(name, col.action, col.method or "", as_flags(col.reason))
    return table


def scores_rich_table(plan: Plan) -> RichTable:
    """Each method's selection score per scored column (* = chosen), and the chosen method's
    expected error on the held-out cells that no choice saw."""
    methods = list(plan.settings.get("methods", []))
    table = RichTable(title="Selection scores: mean over the masked draws that chose (* = "
                            "chosen); held: the chosen method's expected error, on held-out "
                            "cells no choice saw",
                      # No rules between columns and one space apart: nine methods and the
                      # held-out column fit in a 100-column terminal.
                      title_justify="left", box=box.SIMPLE_HEAD, collapse_padding=True,
                      pad_edge=False)
    table.add_column("column", no_wrap=True)
    table.add_column("metric", no_wrap=True)
    for method in methods:
        table.add_column(SHORT.get(method, method), justify="right", no_wrap=True)
    table.add_column("held", justify="right", no_wrap=True)
    ruled = []
    for name, col in plan.columns.items():
        if not col.scores:
            continue
        metric = plan.ranking_metric(col.kind)
        cells = []
        for method in methods:
            value = col.scores.get(method, {}).get(metric)
            star = "*" if method == col.method else ""
            cells.append("" if value is None else f"{value:.3f}{star}")
        held = col.expected_error or {}
        shown = "" if held.get("score") is None else f"{held['score']:.3f}"
        if shown and held.get("metric") != metric:
            shown += f" {held['metric']}"  # the held-out error is in the primary metric
        table.add_row(name, metric, *cells, shown)
        if col.structural is not None:
            ruled.append(name)
    if ruled:
        table.caption = (f"structural blanks get their rule's stand-in, the other blanks the "
                         f"chosen method: {', '.join(ruled)}")
        table.caption_justify = "left"
    return table


def downstream_rich_table(plan: Plan) -> RichTable | None:
    """Every fill scored by cross-validated models of the target (mean ± SE over folds)."""
    down = plan.downstream
    if not down.get("candidates"):
        return None
    target = plan.settings.get("target")
    table = RichTable(title=f"Models of '{target}' after each fill: {down['metric']} "
                            f"(higher is better), mean ± SE over {down['n_splits']} folds; "
                            "* = best", title_justify="left")
    table.add_column("fill")
    models = ("lightgbm", "linear")
    for model in models:
        table.add_column(model, justify="right")
    for name, entry in down["candidates"].items():
        cells = []
        for model in models:
            score = entry.get(model, {})
            if score.get("mean") is None:
                cells.append("n/a")
                continue
            star = "*" if down["best"].get(model) == name else ""
            cells.append(f"{score['mean']:.4f} ± {score['se']:.4f}{star}")
        table.add_row(name, *cells)
    return table


def downstream_lines(plan: Plan) -> list[str]:
    """Plain sentences on what the model experiment found."""
    down = plan.downstream
    if "skipped" in down and isinstance(down["skipped"], str):
        return [f"Model experiment skipped: {down['skipped']}."]
    if not down.get("candidates"):
        return []
    target = plan.settings.get("target")
    lines = [f"The target '{target}' was used only inside this experiment, to score the "
             f"models; it never fills a feature ({down['rows_used']} rows with a known "
             f"target; {down['rows_missing_target']} without one were left out)."]
    if down["no_fill_best"]:
        lines.append("Not filling at all is best for LightGBM: its own handling of blanks "
                     "beat every fill.")
    elif down["no_fill_within_one_se"]:
        lines.append("Not filling is within one standard error of the best fill for LightGBM: "
                     "for that model, filling buys little.")
    flagged = [n for n, e in down.get("indicators", {}).items() if e.get("recommend")]
    if flagged:
        lines.append(f"Missing-indicator columns help the model for: {', '.join(flagged)}; "
                     "the plan sets \"indicator\": true for them.")
    return lines


def parse_metrics(values: list[str] | None) -> dict[str, str]:
    """``--metric NAME`` (repeatable) to a primary metric per kind."""
    chosen = dict(PRIMARY)
    for value in values or ():
        try:
            metric = get_metric(value)
        except OptionError as exc:
            raise OptionError(f"--metric: {exc}") from None
        chosen[metric.kind] = metric.name
    return chosen


@handle_errors
@reading_options
def score(
    file: FileArg,
    out_path: Annotated[Path, typer.Option("--out", "-o", help="Where to write plan.json.")],
    masks: Annotated[str | None, typer.Option(
        help="Comma-separated masks: mcar, mar, mnar, pattern (default: mcar, mar, mnar, and "
             "pattern when the file has holes).")] = None,
    rate: Annotated[float, typer.Option(help="Share of each column's observed cells hidden.")]
    = 0.2,
    repeats: Annotated[int, typer.Option(help="Fresh masks per kind of mask.")] = 3,
    seed: Annotated[int, typer.Option(help="Seed of every random draw.")] = 0,
    methods: Annotated[str | None, typer.Option(
        help="Comma-separated candidate methods (default: all).")] = None,
    metric: Annotated[list[str] | None, typer.Option(
        "--metric", help="Primary metric of its kind (repeatable), e.g. mae or macro_f1.")]
    = None,
    choose_by: Annotated[str, typer.Option(
        "--choose-by", help="Rank methods by accuracy (the primary metric), distribution "
        "(spread and correlations kept) or balanced (both).")] = "accuracy",
    target_check: Annotated[bool, typer.Option(
        "--target-check/--no-target-check",
        help="With --target: score every fill by cross-validated models of the target.")]
    = True,
    target_folds: Annotated[int, typer.Option(
        "--target-folds", help="Folds of the model experiment.")] = 5,
    sample: Annotated[int, typer.Option(
        help="Run the experiment on at most this many rows (0: all rows).")] = 10_000,
    jobs: Annotated[int, typer.Option(
        "--jobs", "-j", help="Parallel tasks (0: all cores). With --cluster, the cluster's "
        "workers run every grid instead (survey checks, experiment, held-out fits, target "
        "check).")]
    = 0,
    cluster: ClusterOpt = None,
    use_target: Annotated[bool, typer.Option(
        "--use-target", help="Let the target help fill the other columns.")] = False,
    report_path: Annotated[Path | None, typer.Option(
        "--report", help="Also write a self-contained HTML report (charts of the survey, the "
                         "experiment and the fill) to this path.")] = None,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
    **reading: Any,
) -> None:
    """Hide known cells, fill them with every method, score them, and write a plan."""
    target = reading["target"]
    check_output(out_path, [file])
    if report_path is not None:
        check_output(report_path, [file, out_path], option="--report")
    if use_target and target is None:
        raise OptionError("--use-target needs --target COLUMN")
    if jobs < 0:
        raise OptionError(f"--jobs must be 0 (all cores) or more, got {jobs}")
    options = ScoreOptions(
        survey=survey_options(**reading, jobs=jobs, seed=seed),
        masks=parse_list(masks, "--masks") if masks is not None else None,
        rate=rate,
        repeats=repeats,
        seed=seed,
        methods=parse_list(methods, "--methods"),
        metrics=parse_metrics(metric),
        sample=sample or None,
        use_target=use_target,
        n_jobs=jobs or (os.cpu_count() or 1),
        choose_by=choose_by,
        downstream=target_check,
        downstream_folds=target_folds,
    )
    with open_executor(jobs, cluster) as executor, \
            progress_bar("scoring methods", quiet=quiet) as update:
        table = read_table(file)
        plan, survey, result = score_table(table, options, progress=update, executor=executor)
    plan.save(out_path)
    if report_path is not None:
        with progress_bar("writing the report", quiet=quiet) as update:
            write_report(report_path, table, plan, survey=survey, progress=update)
    if json:
        print_json({"files": {"plan": str(out_path),
                              "report": None if report_path is None else str(report_path)},
                    "plan": plan.to_dict()})
        return
    if quiet:
        return
    out.print(scores_rich_table(plan))
    out.print(plan_rich_table(plan))
    if result is not None:
        for failure in result.failures:
            out.print(f"note: {failure['method']} failed on {failure['mask']} "
                      f"draw {failure['repeat']}: {failure['error']}")
    if target is not None:
        out.print(f"Rows with the target '{target}' missing: "
                  f"{plan.source.get('target_missing_rows', 0)}")
        models = downstream_rich_table(plan)
        if models is not None:
            out.print(models)
        for line in downstream_lines(plan):
            out.print(line, highlight=False)
    out.print(f"Plan written to {out_path}")
    if report_path is not None:
        out.print(report_line(report_path), markup=False, soft_wrap=True)
