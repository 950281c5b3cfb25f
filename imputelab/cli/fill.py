"""``imputelab fill FILE --plan plan.json --out OUT`` and ``fill FILE --model DIR --out OUT``."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table as RichTable

from imputelab.cli._common import (
    check_output,
    for_a_person,
    handle_errors,
    out,
    progress_bar,
)
from imputelab.cli._options import FileArg, JsonOpt, QuietOpt
from imputelab.errors import OptionError
from imputelab.executors.pool import open_executor
from imputelab.fill.frame import FillReport, FittedFill, fill_table
from imputelab.fill.multiple import write_draws
from imputelab.fill.partitioned import cluster_fill
from imputelab.fill.saved import fill_with_model, load_model
from imputelab.fill.streamed import DEFAULT_CHUNK_ROWS, DEFAULT_FIT_SAMPLE, stream_fill
from imputelab.fill.streamed import fit_sample as sample_and_fit
from imputelab.io.tables import read_table, table_format, write_table
from imputelab.score.plan import Plan


def report_rich_table(report: FillReport) -> RichTable:
    """Cells filled per column."""
    table = RichTable(title="Cells filled", title_justify="left")
    table.add_column("column")
    table.add_column("method")
    table.add_column("filled", justify="right")
    for name, count in report.filled.items():
        table.add_row(name, report.methods.get(name, ""), str(count))
    return table


@handle_errors
def fill(
    file: FileArg,
    out_path: Annotated[Path, typer.Option("--out", "-o", help="Output .csv or .parquet.")],
    plan_path: Annotated[Path | None, typer.Option(
        "--plan", "-p", help="A plan made by score (its methods are fitted on FILE).")] = None,
    model_path: Annotated[Path | None, typer.Option(
        "--model", "-m", help="A model saved by fit: fill without refitting.")] = None,
    unseen: Annotated[str | None, typer.Option(
        "--unseen", metavar="keep|missing|mode",
        help="With --model: an observed label the model never saw is kept as written "
             "(default), filled as a hole, or replaced by the column's most frequent "
             "label.")] = None,
    fit_on: Annotated[Path | None, typer.Option(
        "--fit-on", help="Fit the methods on this reference file instead of FILE.")] = None,
    force: Annotated[bool, typer.Option(
        "--force", help="Fill even when the plan was made from a different file.")] = False,
    stream: Annotated[bool | None, typer.Option(
        "--stream/--no-stream",
        help="Fill chunk by chunk, in flat memory (default: when FILE is over 256 MiB). With "
             "--plan the methods are then fitted on a sample of --fit-sample rows.")] = None,
    sample_rows: Annotated[int, typer.Option(
        "--fit-sample", metavar="N",
        help="When streaming with --plan: fit on a uniform sample of N rows (a file of at "
             "most N rows is fitted whole).")] = DEFAULT_FIT_SAMPLE,
    chunk_rows: Annotated[int, typer.Option(
        "--chunk-rows", help="Rows per chunk when streaming.")] = DEFAULT_CHUNK_ROWS,
    jobs: Annotated[int, typer.Option(
        "--jobs", "-j", help="Chunks filled in parallel when streaming (0: all cores).")] = 1,
    cluster: Annotated[str | None, typer.Option(
        "--cluster", metavar="ADDRESS|local:N",
        help="Fill on Dask: the address of a running scheduler (tcp://host:8786) or local:N "
             "(N worker processes here). FILE may then be a folder of .parquet files; --out "
             "is a new folder of Parquet files. Every worker must see both paths.")] = None,
    draws: Annotated[int, typer.Option(
        "--draws", metavar="M",
        help="Multiple imputation: write M completed copies into the folder --out, each "
             "filled with fresh random draws (analyse each, then pool).")] = 0,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
) -> None:
    """Fill every hole of the plan's imputed columns and write the result.

    With --plan the methods are fitted on FILE (or --fit-on); with --model a model saved by
    fit fills FILE without refitting.
    """
    if cluster is not None:
        if draws or stream:
            raise OptionError("--cluster fills in partitions on the cluster; it does not go "
                              "with --draws or --stream")
        _fill_cluster(file, out_path, plan_path, model_path, fit_on, force, unseen,
                      sample_rows, cluster, json, quiet)
        return
    if draws:
        _fill_draws(file, out_path, plan_path, model_path, fit_on, force, draws, json, quiet)
        return
    out_format = table_format(out_path, option="--out")
    check_output(out_path, [file] + ([fit_on] if fit_on else []))
    if stream is None:
        stream = file.is_file() and file.stat().st_size > STREAM_ABOVE_BYTES
    if stream:
        _fill_streaming(file, out_path, plan_path, model_path, fit_on, force, unseen,
                        sample_rows, chunk_rows, jobs, json, quiet)
        return
    if (plan_path is None) == (model_path is None):
        raise OptionError("give --plan (fit the plan's methods on FILE) or --model (a model "
                          "saved by fit), not both" if plan_path else "give --plan or --model")
    if model_path is not None:
        if fit_on is not None or force:
            raise OptionError("--fit-on and --force go with --plan; a saved model is already "
                              "fitted")
        model = load_model(model_path)
        table = read_table(file)
        with progress_bar("filling", quiet=quiet or json):
            frame, report = fill_with_model(table, model, unseen=unseen or "keep",
                                            text_output=out_format == "csv")
    else:
        if unseen is not None:
            raise OptionError("--unseen goes with --model")
        plan = Plan.load(plan_path)
        table = read_table(file)
        reference = read_table(fit_on, option="--fit-on") if fit_on else None
        with progress_bar("fitting and filling", quiet=quiet or json):
            frame, report = fill_table(table, plan, fit_on=reference, force=force,
                                       text_output=out_format == "csv")
    write_table(frame, out_path, delimiter=table.delimiter if out_format == "csv" else ",")
    _print_report(report, out_path, f" ({len(frame)} rows, {frame.shape[1]} columns).", json,
                  quiet)


def _print_report(report: FillReport, out_path: Path, how: str, json: bool, quiet: bool,
                  **extra: object) -> None:
    """The fill's report: JSON on stdout, or warnings, the table and one closing line."""
    if not for_a_person({"out": str(out_path), **extra, **report.to_dict()}, json=json,
                        quiet=quiet, warnings=report.warnings):
        return
    out.print(report_rich_table(report))
    if report.dropped:
        out.print(f"Dropped: {', '.join(report.dropped)}")
    out.print(f"Wrote {out_path}{how} Filled values are estimates, not measurements.")


def _fill_draws(file: Path, out_dir: Path, plan_path: Path | None, model_path: Path | None,
                fit_on: Path | None, force: bool, m: int, json: bool, quiet: bool) -> None:
    if m < 2:
        raise OptionError(f"--draws must be at least 2 (Rubin's rules need two or more "
                          f"completed tables), got {m}")
    if model_path is not None or plan_path is None:
        raise OptionError("--draws goes with --plan: the draws refit the plan's chains on FILE")
    if out_dir.suffix.lower() in (".csv", ".parquet"):
        raise OptionError(f"--out '{out_dir}': with --draws, give a folder for the M files")
    plan = Plan.load(plan_path)
    table = read_table(file)
    reference = read_table(fit_on, option="--fit-on") if fit_on else None
    with progress_bar("drawing completed tables", quiet=quiet or json) as update:
        paths, report, info = write_draws(table, plan, m, out_dir, fit_on=reference,
                                          force=force, progress=update)
    if not for_a_person({"out": str(out_dir), "files": [str(p) for p in paths], **info},
                        json=json, quiet=quiet, warnings=report.warnings):
        return
    out.print(f"Wrote {m} completed tables to {out_dir} ({paths[0].name} ... "
              f"{paths[-1].name}) and draws.json. Analyse each table, then combine the "
              "estimates with imputelab.pool (Rubin's rules). Filled values are estimates, "
              "not measurements.")


#: Files larger than this are filled chunk by chunk unless --no-stream is given.
STREAM_ABOVE_BYTES = 256 * 2**20


def _fitted(file: Path, plan_path: Path | None, model_path: Path | None,
            fit_on: Path | None, force: bool, unseen: str | None, sample_rows: int,
            fix: str) -> tuple[FittedFill, Plan, FillReport, str]:
    """The fitted methods a chunked fill applies: a saved model's, or the plan's fitted on a
    sample of FILE (or --fit-on); with the report so far and a note for the closing line."""
    if (plan_path is None) == (model_path is None):
        raise OptionError("give --plan or --model, not both" if plan_path else
                          "give --plan or --model")
    if unseen not in (None, "keep"):
        raise OptionError(f"--unseen missing|mode needs the whole file in memory; {fix}")
    if sample_rows < 1:
        raise OptionError("--fit-sample must be at least 1")
    if model_path is not None:
        if fit_on is not None or force:
            raise OptionError("--fit-on and --force go with --plan; a saved model is already "
                              "fitted")
        model = load_model(model_path)
        report = FillReport()
        report.warnings.extend(model.warnings)
        return model.fitted, model.plan, report, ""
    plan = Plan.load(plan_path)
    source, option = (fit_on, "--fit-on") if fit_on else (file, "FILE")
    if source.is_dir():
        raise OptionError(f"FILE '{file}' is a folder: fit the plan once with imputelab fit "
                          "and pass --model, or give --fit-on FILE to fit on")
    fitted, report = sample_and_fit(source, plan, n=sample_rows, force=force, option=option)
    return fitted, plan, report, f" Methods fitted on at most {sample_rows:,} rows of " \
        f"{source.name}."


def _fill_streaming(file: Path, out_path: Path, plan_path: Path | None,
                    model_path: Path | None, fit_on: Path | None, force: bool,
                    unseen: str | None, sample_rows: int, chunk_rows: int, jobs: int,
                    json: bool, quiet: bool) -> None:
    if chunk_rows < 1 or jobs < 0:
        raise OptionError("--fit-sample and --chunk-rows must be at least 1, --jobs 0 or more")
    with progress_bar("filling in chunks", quiet=quiet or json) as update:
        fitted, plan, report, note = _fitted(file, plan_path, model_path, fit_on, force,
                                             unseen, sample_rows, "pass --no-stream")
        report = stream_fill(file, out_path, fitted, plan, chunk_rows=chunk_rows,
                             progress=update, report=report,
                             n_jobs=jobs or (os.cpu_count() or 1))
    _print_report(report, out_path, f", chunk by chunk.{note}", json, quiet, streamed=True)


def _fill_cluster(file: Path, out_dir: Path, plan_path: Path | None, model_path: Path | None,
                  fit_on: Path | None, force: bool, unseen: str | None, sample_rows: int,
                  cluster: str, json: bool, quiet: bool) -> None:
    if out_dir.suffix.lower() == ".csv":
        raise OptionError(f"--out '{out_dir}': with --cluster the output is a folder of "
                          "Parquet files; give a folder name (e.g. filled or filled.parquet)")
    check_output(out_dir, [file] + ([fit_on] if fit_on else []))
    fitted, plan, report, note = _fitted(file, plan_path, model_path, fit_on, force, unseen,
                                         sample_rows, "drop --cluster")
    with open_executor(cluster=cluster) as executor, \
            progress_bar("filling partitions", quiet=quiet or json) as update:
        report = cluster_fill(file, out_dir, fitted, plan, executor.client, progress=update,
                              report=report)
    _print_report(report, out_dir, f", a folder of Parquet files, on the cluster.{note}", json,
                  quiet, cluster=True)
