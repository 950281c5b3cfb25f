"""``imputelab fit FILE --plan plan.json --model DIR``."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.table import Table as RichTable

from imputelab.cli._common import for_a_person, handle_errors, out
from imputelab.cli._options import FileArg, JsonOpt, QuietOpt
from imputelab.fill.saved import SavedModel, fit_table, save_model
from imputelab.io.tables import read_table
from imputelab.score.plan import Plan


def model_rich_table(model: SavedModel) -> RichTable:
    """What the model does with each training column."""
    table = RichTable(title="Model", title_justify="left")
    table.add_column("column", no_wrap=True)
    table.add_column("kind")
    table.add_column("role")
    table.add_column("method")
    fills = {n: g.method_name for g in model.fitted.groups for n in g.columns}
    for name, entry in model.schema.items():
        table.add_row(name, entry["kind"], entry["role"], fills.get(name, ""))
    return table


@handle_errors
def fit(
    file: FileArg,
    plan_path: Annotated[Path, typer.Option("--plan", "-p", help="A plan made by score.")],
    model_path: Annotated[Path, typer.Option(
        "--model", "-m", help="Folder to save the fitted model in (new or empty).")],
    overwrite: Annotated[bool, typer.Option(
        "--overwrite", help="Replace the model already saved in --model.")] = False,
    force: Annotated[bool, typer.Option(
        "--force", help="Fit even when the plan was made from a different file.")] = False,
    json: JsonOpt = False,
    quiet: QuietOpt = False,
) -> None:
    """Fit the plan's methods on FILE and save them, to fill new files without refitting."""
    plan = Plan.load(plan_path)
    table = read_table(file)
    fitted, typed, report = fit_table(table, plan, force=force)
    model = save_model(fitted, model_path, typed, source=table, overwrite=overwrite)
    summary = {"model": str(model_path), "plan_fingerprint": model.plan_fingerprint,
               "training": model.training, "versions": model.versions,
               "columns": {n: {"kind": e["kind"], "role": e["role"],
                               "method": next((g.method_name for g in fitted.groups
                                               if n in g.columns), None)}
                           for n, e in model.schema.items()},
               "warnings": report.warnings}
    if not for_a_person(summary, json=json, quiet=quiet, warnings=report.warnings):
        return
    out.print(model_rich_table(model))
    out.print(f"Saved model to {model_path} (fitted on {len(typed)} rows of {table.path.name}). "
              f"Fill a new file with: imputelab fill NEWFILE --model {model_path} --out OUT",
              markup=False)
