"""The benchmark's results as files: ``results.json``, ``results.md`` and ``ratios.svg``."""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from imputelab.bench.options import PLAN
from imputelab.bench.references import REFERENCES, SPEED_REFERENCE
from imputelab.io.tables import atomic_path

__all__ = ["plain_data", "results_markdown", "write_bench"]


def _fmt(value: float, se: float | None = None, digits: int = 3) -> str:
    if value is None or not math.isfinite(value):
        return ""
    text = f"{value:.{digits}f}"
    if se is not None and math.isfinite(se):
        text += f" ± {se:.{digits}f}"
    return text


def results_markdown(results: Mapping[str, Any], command: str = "") -> str:
    """The benchmark's results as Markdown."""
    s = results["settings"]
    lines = ["# Benchmark: imputelab against scikit-learn's imputers", ""]
    if command:
        lines += ["```bash", command, "```", ""]
    if results.get("partial"):
        lines += ["**Partial results: the run was still going when this was written.**", ""]
    lines += [f"Masks {', '.join(s['masks'])} at rate {s['rate']}; {s['repeats']} scored draws "
              f"per mask (seed {s['seed']}); each draw's plan chosen by `score` on the table with "
              f"that draw's cells blank, from {s['selection_repeats']} draws per mask of its own "
              f"among the cells still observed. {results['machine']['cores']} "
              f"cores, Python {results['machine']['python']}; {results['seconds']:.0f} s.",
              "", "Errors: NRMSE (mean over numeric columns) and PFC (share of wrong labels, "
              "mean over label columns), mean ± standard error over the draws. Ratios divide "
              "by the best scikit-learn reference of that dataset and mask (chosen after "
              "seeing the scores); seconds are fit + fill of one draw on one thread, and "
              f"× RF divides by {SPEED_REFERENCE}. The fills are estimates, not "
              "measurements.", "",
              "## Summary", "",
              "| dataset | rows | mask | plan NRMSE | best reference | plan / best | "
              "plan PFC | plan / best (PFC) | plan / Bayes floor |",
              "|---|---:|---|---:|---|---:|---:|---:|---:|"]
    for name, entry in results["datasets"].items():
        for mask, summary in entry["masks"].items():
            plan = summary["methods"][PLAN]
            best = summary.get("best_reference_nrmse", "")
            lines.append(
                f"| {name} | {entry['rows_used']:,} | {mask} | "
                f"{_fmt(plan['nrmse'], plan['nrmse_se'])} | {best} | "
                f"{_fmt(plan.get('nrmse_ratio', math.nan))} | "
                f"{_fmt(plan['pfc'], plan['pfc_se'])} | {_fmt(plan.get('pfc_ratio', math.nan))}"
                f" | {_fmt(plan.get('bayes_ratio', math.nan))} |")
    for name, why in results.get("skipped", {}).items():
        lines.append(f"| {name} | | | {why} | | | | | |")
    for name, entry in results["datasets"].items():
        sampled = (f", a seeded sample of {entry['rows_used']:,} of its "
                   f"{entry['rows_complete']:,} complete rows"
                   if entry["rows_used"] < entry["rows_complete"]
                   else f", its {entry['rows_used']:,} complete rows")
        lines += ["", f"## {name}", "",
                  f"{len(entry['columns'])} columns{sampled}. {entry['note']}".rstrip(), ""]
        chosen = pd.Series([m for plan in entry["plans"].values() for m in plan.values()]
                           ).value_counts()
        lines.append(f"Plans (one per scored draw, chosen in {entry['plan_score_seconds']:.1f} s "
                     "in all), column × draw: "
                     + ", ".join(f"{m} × {c}" for m, c in chosen.items()) + ".")
        for key, blend in entry["plan_blend"].items():
            weights = ", ".join(f"{m} {w:.2f}" for m, w in blend["weights"].items())
            lines.append(f"Blend weights in the plan for {key}: {weights}; labels from "
                         f"{blend['label_method'] or '-'}.")
        for mask, summary in entry["masks"].items():
            lines += ["", f"### {name}, {mask}", "",
                      "| method | NRMSE | × best | PFC | × best | s | × RF |",
                      "|---|---:|---:|---:|---:|---:|---:|"]
            for method, m in summary["methods"].items():
                lines.append(
                    f"| {method} | {_fmt(m['nrmse'], m['nrmse_se'])} | "
                    f"{_fmt(m.get('nrmse_ratio', math.nan))} | {_fmt(m['pfc'], m['pfc_se'])} | "
                    f"{_fmt(m.get('pfc_ratio', math.nan))} | {_fmt(m['seconds'], digits=2)} | "
                    f"{_fmt(m.get('seconds_ratio', math.nan), digits=2)} |")
    return "\n".join(lines) + "\n"


def _plot(results: Mapping[str, Any], path: Path) -> None:
    import imputelab.report.charts as charts  # matplotlib loads only when a plot is drawn

    cells = [(f"{n} {m}", s) for n, e in results["datasets"].items()
             for m, s in e["masks"].items()]
    shown = [PLAN, "blend", "chained-linear", "chained-forest", "chained-boosted", "knn",
             *REFERENCES]
    series = {method: [s["methods"].get(method, {}).get("nrmse_ratio", np.nan)
                       for _, s in cells] for method in shown}
    fig = charts.ratio_bars([c for c, _ in cells], series,
                            ylabel="NRMSE / best scikit-learn reference",
                            title="Error relative to the best scikit-learn imputer "
                                  "(lower is better)")
    svg = charts.figure_svg(fig, alt="NRMSE of each method divided by the best scikit-learn "
                                     "reference, per dataset and mask.", prefix="bench")
    with atomic_path(path) as tmp:
        Path(tmp).write_text(svg, encoding="utf-8")


def plain_data(value: Any) -> Any:
    """JSON-ready: NaN as null, numpy scalars as Python numbers, tuple keys as text."""
    if isinstance(value, Mapping):
        return {str(k): plain_data(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain_data(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        return round(value, 6) if math.isfinite(value) else None
    return value


def write_bench(results: Mapping[str, Any], out: Path, command: str = "") -> list[Path]:
    """Write ``results.json``, ``results.md`` and ``ratios.svg`` into ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    paths = [out / "results.json", out / "results.md", out / "ratios.svg"]
    with atomic_path(paths[0]) as tmp:
        tmp.write_text(json.dumps(plain_data({"command": command, **results}), indent=2)
                       + "\n", encoding="utf-8")
    with atomic_path(paths[1]) as tmp:
        tmp.write_text(results_markdown(results, command), encoding="utf-8")
    _plot(results, paths[2])
    return paths
