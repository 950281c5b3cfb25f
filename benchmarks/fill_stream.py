"""Streaming fill of files larger than memory: peak memory and throughput.

Generates demo trip logs of 1,000,000 and 5,000,000 rows x 12 columns as CSV (chunk by
chunk, so generating is memory-flat too), scores a plan on a 20,000-row reservoir sample of
the first file, fits it once on a reservoir sample (``--fit-sample``, default 200,000 rows)
and saves the model. Then, for every file, each of these runs in its own process, so that
its peak memory is its own:

- ``fill``: ``imputelab.fill.streamed.stream_fill`` with the loaded model (``fill --model``),
  in this process (``jobs=1``) and with worker processes (``--jobs``);
- ``stream, pass-through``: ``stream_fill`` with a plan that fills nothing and reads every
  column as text: the streaming layer's own cost (read, frames, text, CSV writing);
- ``pyarrow copy``: ``pyarrow.csv.open_csv`` -> ``pyarrow.csv.CSVWriter``, text columns, the
  same read options as the fill (the floor any streaming fill stands on);
- ``pandas chunks``: ``pandas.read_csv(chunksize=...)`` -> ``DataFrame.to_csv``, text columns.

Peak memory is sampled from ``/proc`` every 20 ms over the process and its children (worker
processes with ``--jobs 2``): the sum of their RSS (which counts shared library pages once
per process) and the sum of their PSS (shared pages split between the processes sharing
them). Throughput is data rows per second of the timed section (the interpreter's start,
imports and model loading are left out of all runs alike).

    python benchmarks/fill_stream.py [--rows 1000000,5000000] [--fit-sample 200000]
        [--methods mean,median,mode,chained-linear] [--jobs 1,2] [--dir /tmp] [--out r.json]

Targets (issue 4, "Files larger than memory"): peak RSS of the fill under 1.5 GB at both sizes
(flat from 1M to 5M rows); throughput at least 0.3x the bare pyarrow copy, and above the
pandas chunked path. The files take about 100 bytes a row; they are deleted at the end.
"""

from __future__ import annotations

import argparse
import filecmp
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

GENERATE_ROWS = 200_000  # rows per generator call (make_trip_log takes at most 999,999)
# 12 of the demo's columns: labels, timestamps, numbers with disguised blanks ("not weighed")
# and a missing-value code (driver_rating 99), and free text with commas (quoted cells).
COLUMNS = ["depot", "departed_at", "arrived_at", "distance_km", "payload_kg", "cargo_class",
           "setpoint_c", "ambient_c", "door_open_min", "fuel_l", "driver_rating", "remark"]
CODES = {"driver_rating": [99]}


# ------------------------------------------------------------------------------- children


def child_fill(path: str, out: str, model: str, jobs: int) -> dict:
    from imputelab.fill.saved import load_model
    from imputelab.fill.streamed import stream_fill

    saved = load_model(model)
    start = time.perf_counter()
    report = stream_fill(path, out, saved.fitted, saved.plan, n_jobs=jobs)
    seconds = time.perf_counter() - start
    return {"seconds": seconds, "filled": sum(report.filled.values())}


def child_passthrough(path: str, out: str) -> dict:
    from imputelab.fill.frame import clean_with_plan, fit_plan
    from imputelab.fill.streamed import reservoir_sample, stream_fill
    from imputelab.score.plan import ColumnPlan, Plan

    head = reservoir_sample(path, 1000, seed=0)
    plan = Plan(source={}, settings={}, columns={
        name: ColumnPlan(kind="text", missing_fraction=0.0, action="exclude",
                         cleaning={"kind": "text"}) for name in head.frame.columns})
    fitted = fit_plan(clean_with_plan(head, plan)[0], plan)
    start = time.perf_counter()
    stream_fill(path, out, fitted, plan)
    seconds = time.perf_counter() - start
    same = filecmp.cmp(out, path, shallow=False)  # block by block; pandas wrote the input
    return {"seconds": seconds, "output_is_input": same}


def _string_options(path: str):
    import pyarrow as pa
    import pyarrow.csv as pacsv

    with open(path, encoding="utf-8") as handle:
        names = handle.readline().rstrip("\n").split(",")
    return (pacsv.ReadOptions(block_size=1 << 20),
            pacsv.ParseOptions(newlines_in_values=True),
            pacsv.ConvertOptions(column_types=dict.fromkeys(names, pa.string()),
                                 strings_can_be_null=False, null_values=[]))


def child_arrow(path: str, out: str) -> dict:
    import pyarrow.csv as pacsv

    read, parse, convert = _string_options(path)
    start = time.perf_counter()
    rows = 0
    reader = pacsv.open_csv(path, read_options=read, parse_options=parse,
                            convert_options=convert)
    with pacsv.CSVWriter(out, reader.schema) as writer:
        for batch in reader:
            writer.write_batch(batch)
            rows += batch.num_rows
    return {"seconds": time.perf_counter() - start, "rows": rows}


def child_pandas(path: str, out: str) -> dict:
    import pandas as pd

    from imputelab.fill.streamed import DEFAULT_CHUNK_ROWS

    start = time.perf_counter()
    rows = 0
    with open(out, "w", encoding="utf-8", newline="") as handle:
        chunks = pd.read_csv(path, dtype=str, keep_default_na=False, na_filter=False,
                             chunksize=DEFAULT_CHUNK_ROWS)
        for i, chunk in enumerate(chunks):
            chunk.to_csv(handle, index=False, header=i == 0, lineterminator="\n")
            rows += len(chunk)
    return {"seconds": time.perf_counter() - start, "rows": rows}


def run_child(argv: list[str]) -> None:
    kind, *args = argv
    if kind == "fill":
        result = child_fill(args[0], args[1], args[2], int(args[3]))
    elif kind == "arrow":
        result = child_arrow(*args)
    elif kind == "passthrough":
        result = child_passthrough(*args)
    else:
        result = child_pandas(*args)
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(json.dumps({**result, "maxrss_mb": own, "children_maxrss_mb": workers}))


# ------------------------------------------------------------------------------ the parent


def tree_memory(pid: int) -> tuple[int, int]:
    """Summed RSS and PSS bytes of a process and all its descendants, from /proc."""
    rss = pss = 0
    todo = [pid]
    while todo:
        current = todo.pop()
        try:
            with open(f"/proc/{current}/smaps_rollup") as handle:
                for line in handle:
                    if line.startswith("Rss:"):
                        rss += int(line.split()[1]) * 1024
                    elif line.startswith("Pss:"):
                        pss += int(line.split()[1]) * 1024
            for task in os.listdir(f"/proc/{current}/task"):
                with open(f"/proc/{current}/task/{task}/children") as handle:
                    todo.extend(int(p) for p in handle.read().split())
        except (FileNotFoundError, ProcessLookupError, PermissionError):
            continue
    return rss, pss


def measure(argv: list[str]) -> dict:
    """Run this script as a child doing one job; sample its memory while it runs."""
    process = subprocess.Popen([sys.executable, __file__, "--child", *argv],
                               stdout=subprocess.PIPE, text=True)
    peak_rss = peak_pss = 0
    while process.poll() is None:
        rss, pss = tree_memory(process.pid)
        peak_rss, peak_pss = max(peak_rss, rss), max(peak_pss, pss)
        time.sleep(0.02)
    output = process.stdout.read()
    if process.returncode != 0:
        raise SystemExit(f"child {argv[0]} failed with exit code {process.returncode}")
    result = json.loads(output.strip().splitlines()[-1])
    result.update(peak_rss_mb=peak_rss / 2**20, peak_pss_mb=peak_pss / 2**20)
    return result


def generate(path: Path, rows: int) -> None:
    """A demo trip log of ``rows`` rows written chunk by chunk (memory-flat)."""
    from imputelab.bench.demo_data import make_trip_log

    with open(path, "w", encoding="utf-8", newline="") as handle:
        done = part = 0
        while done < rows:
            n = min(GENERATE_ROWS, rows - done)
            frame = make_trip_log(n, seed=1000 + part)[COLUMNS]
            frame.to_csv(handle, index=False, header=part == 0, lineterminator="\n")
            done += n
            part += 1


def fit_model(path: Path, model: Path, methods: list[str], fit_rows: int) -> dict:
    from threadpoolctl import threadpool_limits

    from imputelab.fill.saved import fit_table, save_model
    from imputelab.fill.streamed import reservoir_sample
    from imputelab.score.build import ScoreOptions, score_table
    from imputelab.survey.table import SurveyOptions

    start = time.perf_counter()
    options = ScoreOptions(masks=("mcar",), repeats=1, methods=methods, downstream=False,
                           survey=SurveyOptions(missing_codes=CODES))
    with threadpool_limits(limits=1):
        plan, _, _ = score_table(reservoir_sample(path, 20_000, seed=1), options)
        scored = time.perf_counter()
        sample = reservoir_sample(path, fit_rows, seed=2)
        sampled = time.perf_counter()
        fitted, typed, _ = fit_table(sample, plan)
        save_model(fitted, model, typed, source=sample)
    done = time.perf_counter()
    return {"methods": {n: c.method for n, c in plan.columns.items() if c.method},
            "score_s": scored - start, "sample_s": sampled - scored, "fit_s": done - sampled}


def main() -> None:
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        run_child(sys.argv[2:])
        return
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", default="1000000,5000000")
    parser.add_argument("--fit-sample", type=int, default=200_000)
    parser.add_argument("--methods", default="mean,median,mode,chained-linear")
    parser.add_argument("--jobs", default="1,2", help="worker processes of the fill")
    parser.add_argument("--dir", default=tempfile.gettempdir())
    parser.add_argument("--out", help="also write the results as JSON")
    args = parser.parse_args()
    sizes = [int(r) for r in args.rows.split(",")]
    jobs = [int(j) for j in args.jobs.split(",")]
    work = Path(tempfile.mkdtemp(prefix="fill_stream.", dir=args.dir))
    print(f"python {platform.python_version()}, {os.cpu_count()} cores, files in {work}")
    results: dict = {"sizes": {}}
    try:
        files = {}
        for rows in sizes:
            start = time.perf_counter()
            files[rows] = work / f"trips_{rows}.csv"
            generate(files[rows], rows)
            size = files[rows].stat().st_size
            print(f"generated {rows:,} rows, {size / 2**20:,.0f} MiB in "
                  f"{time.perf_counter() - start:.0f} s")
        model = work / "model"
        fit = fit_model(files[sizes[0]], model, args.methods.split(","), args.fit_sample)
        results["fit"] = fit
        print(f"plan: {fit['methods']}")
        print(f"scored on 20,000 rows in {fit['score_s']:.0f} s; reservoir sample of "
              f"{args.fit_sample:,} rows in {fit['sample_s']:.1f} s; fitted in "
              f"{fit['fit_s']:.0f} s")
        for rows in sizes:
            path, out = str(files[rows]), str(work / "out.csv")
            runs = {"pyarrow copy": measure(["arrow", path, out]),
                    "pandas chunks": measure(["pandas", path, out]),
                    "stream, pass-through": measure(["passthrough", path, out])}
            for j in jobs:
                runs[f"fill (jobs={j})"] = measure(["fill", path, out, str(model), str(j)])
            os.remove(out)
            base = runs["pyarrow copy"]["rows"] / runs["pyarrow copy"]["seconds"]
            pandas = runs["pandas chunks"]["rows"] / runs["pandas chunks"]["seconds"]
            print(f"\n{rows:,} rows ({files[rows].stat().st_size / 2**20:,.0f} MiB)")
            print(f"  {'':21} {'seconds':>8} {'rows/s':>10} {'x pyarrow':>9} {'x pandas':>8} "
                  f"{'peak RSS MiB':>12} {'peak PSS MiB':>12}")
            for name, run in runs.items():
                run.setdefault("rows", rows)
                speed = run["rows"] / run["seconds"]
                run.update(rows_per_s=speed, vs_pyarrow=speed / base, vs_pandas=speed / pandas)
                print(f"  {name:21} {run['seconds']:8.1f} {speed:10,.0f} {speed / base:9.2f} "
                      f"{speed / pandas:8.2f} {run['peak_rss_mb']:12,.0f} "
                      f"{run['peak_pss_mb']:12,.0f}")
            same = runs["stream, pass-through"]["output_is_input"]
            print(f"  pass-through output byte-identical to the input: {same}")
            results["sizes"][rows] = runs
        if len(sizes) > 1:
            print()
            for j in jobs:
                peaks = [results["sizes"][r][f"fill (jobs={j})"]["peak_rss_mb"] for r in sizes]
                print(f"fill (jobs={j}) peak RSS from {sizes[0]:,} to {sizes[-1]:,} rows: "
                      + " -> ".join(f"{p:,.0f}" for p in peaks) + " MiB (target < 1,536)")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    if args.out:
        Path(args.out).write_text(json.dumps(results, indent=2, default=str), encoding="utf-8")


if __name__ == "__main__":
    main()
