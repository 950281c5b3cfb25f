"""How long ``score`` takes, and what each method costs.

Runs a full default ``score`` (every method x mcar, mar, mnar, pattern x 3 repeats, plus the
survey's checks) on the demo trip log at 5,000 and 20,000 rows, once without and once with the
model experiment on the target (``--target-check``), and times each method's fit + fill on one
masked copy of the table, printed as a ratio to mean imputation measured in the same run.

    python benchmarks/score_speed.py [--rows 5000,20000] [--jobs 2] [--out results.json]
        [--california ../shared/data/california_housing.csv] [--no-costs] [--no-target-check]

Target (issues: main job, benchmarks): a full default score on 20,000 rows x 12 columns in
under 60 s on 2 cores. ``--california`` also times a default score of the California housing
CSV (20,640 rows x 10 columns, no target). Time it on a quiet machine: the figure is wall
time, so any other busy process inflates it.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import tempfile
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from imputelab.bench.demo_data import write_trip_log
from imputelab.frame.encoding import with_derived
from imputelab.frame.setup import default_action, working_setup
from imputelab.io.tables import read_table
from imputelab.masks import get_mask
from imputelab.methods import get_method, get_method_names
from imputelab.score.build import ScoreOptions, score_table
from imputelab.survey.table import SurveyOptions, survey_table

TARGET = "spoiled"
CODES = {"driver_rating": [99]}


def method_costs(path: Path, seed: int = 0) -> dict[str, float]:
    """Seconds of one fit + fill per method on one MCAR-masked copy (one thread)."""
    survey = survey_table(read_table(path), SurveyOptions(missing_codes=CODES, target=TARGET))
    actions = {n: default_action(c.spec.kind, drop=c.drop, is_target=n == TARGET)
               for n, c in survey.columns.items()}
    targets, encoding = working_setup(survey.typed, survey.specs, actions, target=TARGET)
    working = encoding.encode(survey.typed)
    hidden = get_mask("mcar").sample(working, targets, 0.2, np.random.default_rng(seed))
    masked = working.copy()
    for j, name in enumerate(targets):
        column = masked[name].copy()
        column.iloc[np.flatnonzero(hidden[:, j])] = np.nan
        masked[name] = column
    frame = with_derived(masked, encoding.kinds)
    costs = {}
    with threadpool_limits(limits=1):
        for name in get_method_names():
            method = get_method(name)
            if "random_state" in method.get_params():
                method.set_params(random_state=seed)
            usable = [t for t in targets
                      if method.unsupported_reason(encoding.kinds[t]) is None]
            start = time.perf_counter()
            method.fit_transform(frame, usable)
            costs[name] = time.perf_counter() - start
    return costs


def full_score(path: Path, jobs: int, downstream: bool, trips: bool = True) -> tuple[float, int]:
    """Wall seconds of a default score, and the number of grid tasks."""
    table = read_table(path)
    survey = (SurveyOptions(missing_codes=CODES, target=TARGET, n_jobs=jobs) if trips
              else SurveyOptions(n_jobs=jobs))
    options = ScoreOptions(survey=survey, n_jobs=jobs, downstream=downstream)
    counted: dict[str, int] = {}

    def progress(done: int, total: int) -> None:
        counted.setdefault("total", total)  # the grid reports first, then the model check

    start = time.perf_counter()
    score_table(table, options, progress=progress)
    return time.perf_counter() - start, counted.get("total", 0)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", default="5000,20000")
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--out", type=Path, default=None)
    parser.add_argument("--california", type=Path, default=None,
                        help="also time a default score of this CSV")
    parser.add_argument("--no-costs", dest="costs", action="store_false",
                        help="skip the per-method cost table")
    parser.add_argument("--no-target-check", dest="target_check", action="store_false",
                        help="skip the run with the model experiment")
    args = parser.parse_args()
    results = {"machine": {"cores": os.cpu_count(), "python": platform.python_version(),
                           "jobs": args.jobs}, "runs": []}
    with tempfile.TemporaryDirectory() as tmp:
        for rows in [int(r) for r in args.rows.split(",")]:
            path = write_trip_log(Path(tmp) / f"trips_{rows}.csv", n_trips=rows)
            wall, tasks = full_score(path, args.jobs, downstream=False)
            with_model = (full_score(path, args.jobs, downstream=True)[0] if args.target_check
                          else float("nan"))
            costs = method_costs(path) if args.costs else {}
            base = costs.get("mean", 1.0)
            run = {"rows": rows, "score_seconds": round(wall, 1), "tasks": tasks,
                   "score_with_target_check_seconds": round(with_model, 1),
                   "method_seconds": {m: round(s, 3) for m, s in costs.items()},
                   "ratio_to_mean": {m: round(s / base, 1) for m, s in costs.items()}}
            results["runs"].append(run)
            print(f"\n{rows} rows: full default score {wall:.1f} s wall "
                  f"({tasks} fits, {args.jobs} jobs; experiment sample "
                  f"{ScoreOptions().sample} rows); with the model check on '{TARGET}': "
                  f"{with_model:.1f} s")
            if costs:
                print(f"{'method':18s} {'fit+fill s':>10s} {'x mean':>10s}")
            for name, seconds in costs.items():
                print(f"{name:18s} {seconds:10.3f} {seconds / base:10.1f}")
    if args.california is not None:
        wall, tasks = full_score(args.california, args.jobs, downstream=False, trips=False)
        results["california"] = {"score_seconds": round(wall, 1), "tasks": tasks}
        print(f"\nCalifornia housing ({args.california.name}): full default score {wall:.1f} s "
              f"wall ({tasks} fits, {args.jobs} jobs)")
    if args.out:
        args.out.write_text(json.dumps(results, indent=2) + "\n")


if __name__ == "__main__":
    main()
