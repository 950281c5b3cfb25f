"""``imputelab bench --out DIR``: imputelab against scikit-learn's imputers on open data."""

from __future__ import annotations

import os
import shlex
import sys
from pathlib import Path
from typing import Annotated

import typer

from imputelab.bench.runner import PLAN, BenchOptions, plain_data, run_bench, write_bench
from imputelab.cli._common import (
    err,
    handle_errors,
    out,
    parse_list,
    print_json,
    progress_bar,
)
from imputelab.cli._flags import as_flags
from imputelab.cli._options import ClusterOpt, JobsOpt, JsonOpt, QuietOpt
from imputelab.errors import OptionError
from imputelab.executors.pool import open_executor


@handle_errors
def bench(
    out_dir: Annotated[Path, typer.Option("--out", "-o", help="Folder for results.md, "
                                                              "results.json and ratios.svg.")],
    datasets: Annotated[str | None, typer.Option(
        help="Comma-separated datasets (default: every file in datasets_meta/).")] = None,
    masks: Annotated[str, typer.Option(help="Comma-separated masks: mcar, mar, mnar.")]
    = "mcar,mar",
    rate: Annotated[float, typer.Option(help="Share of each column's cells hidden.")] = 0.2,
    repeats: Annotated[int, typer.Option(help="Scored draws per mask.")] = 5,
    selection_repeats: Annotated[int, typer.Option(
        "--selection-repeats", help="Draws per mask of the plan's own score run.")] = 3,
    max_rows: Annotated[int, typer.Option(
        "--max-rows", help="Use at most this many complete rows per dataset, a seeded sample "
                           "(0: all; a dataset's meta file may set a lower cap).")] = 0,
    california: Annotated[Path | None, typer.Option(
        help="The California housing CSV (else scikit-learn's cached copy, else skipped).")]
    = None,
    seed: Annotated[int, typer.Option(help="Seed of every draw.")] = 0,
    jobs: JobsOpt = 0,
    cluster: ClusterOpt = None,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
) -> None:
    """Fill the same hidden cells with every method, the plan and scikit-learn's imputers."""
    if jobs < 0:
        raise OptionError(f"--jobs must be 0 (all cores) or more, got {jobs}")
    if max_rows < 0:
        raise OptionError(f"--max-rows must be 0 (all rows) or more, got {max_rows}")
    if out_dir.exists() and not out_dir.is_dir():
        raise OptionError(f"--out '{out_dir}' is a file; give a folder")
    options = BenchOptions(
        datasets=parse_list(datasets, "--datasets"), masks=parse_list(masks, "--masks") or [],
        rate=rate, repeats=repeats, seed=seed, california=california,
        selection_repeats=selection_repeats, max_rows=max_rows or None,
        n_jobs=jobs or (os.cpu_count() or 1))
    options.validate()
    command = "imputelab " + " ".join(shlex.quote(a) for a in sys.argv[1:])

    def note(line: str) -> None:
        if not quiet and not json:
            err.print(as_flags(line), highlight=False, markup=False)

    with open_executor(jobs, cluster) as executor, \
            progress_bar("benchmark", quiet=quiet) as update:
        # Results so far are written after each dataset, so a long run leaves them behind.
        results = run_bench(options, progress=lambda stage, done, total: update(done, total),
                            note=note, done=lambda part: write_bench(part, out_dir, command),
                            executor=executor)
    paths = write_bench(results, out_dir, command)
    if json:
        print_json(plain_data(results))
        return
    if quiet:
        return
    for name, entry in results["datasets"].items():
        for mask, summary in entry["masks"].items():
            plan = summary["methods"][PLAN]
            ratio = plan.get("nrmse_ratio", plan.get("pfc_ratio"))
            text = f"{ratio:.3f}" if ratio is not None else "-"
            out.print(f"{name:14s} {mask:5s} plan / best scikit-learn reference: {text}")
    out.print(f"Wrote {', '.join(str(p) for p in paths)}")
