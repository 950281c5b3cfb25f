"""Saved models: a fitted plan written to a folder as plain data, and read back.

The folder's layout and the codec of fitted state are in :mod:`imputelab.fill.model_format`;
filling a new file with a loaded model is :mod:`imputelab.fill.model_fill`.

``save_model`` writes the directory beside its target and renames it into place; it writes
into a new or empty folder, replaces an imputelab model only when asked (``overwrite``), and
never touches a folder holding anything else. ``load_model`` checks every file against the
manifest before it parses anything.
"""

from __future__ import annotations

import io
import json
import os
import zipfile
from collections.abc import Mapping
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd

from imputelab.errors import ImputelabError, PlanError, TableIOError, param
from imputelab.fill.frame import (
    FillReport,
    FittedFill,
    _Group,
    check_plan,
    clean_with_plan,
    fit_plan,
)
from imputelab.fill.model_fill import UNSEEN_CHOICES, ModelFillReport, fill_with_model
from imputelab.fill.model_format import (
    _ARRAYS,
    _LIBRARIES,
    _MANIFEST,
    _MODEL,
    _PLAN,
    _SAFE_PATH,
    MODEL_FORMAT,
    MODEL_VERSION,
    SavedModel,
    _json_bytes,
    _sha256,
    _Store,
    _versions,
)
from imputelab.frame.encoding import Encoding
from imputelab.io.columns import new_token_warnings
from imputelab.io.tables import Table, atomic_dir
from imputelab.methods import METHODS
from imputelab.methods.simple import most_frequent
from imputelab.score.plan import Plan

__all__ = [
    "MODEL_FORMAT",
    "MODEL_VERSION",
    "UNSEEN_CHOICES",
    "ModelFillReport",
    "SavedModel",
    "fill_with_model",
    "fit_table",
    "load_model",
    "save_model",
]


# ---------------------------------------------------------------------------------- fitting

def fit_table(table: Table, plan: Plan, *, force: bool = False
              ) -> tuple[FittedFill, pd.DataFrame, FillReport]:
    """Check a table against a plan, clean it as the plan says and fit the plan's methods.

    Parameters
    ----------
    table : Table
    plan : Plan
    force : bool
        Fit even when the plan was made from another file or other columns.

    Returns
    -------
    fitted : FittedFill
    typed : DataFrame
        The cleaned training table (planned columns); :func:`save_model` takes its schema.
    report : FillReport
        Warnings only.
    """
    report = FillReport()
    report.warnings.extend(check_plan(plan, table, force=force))
    typed, report.new_tokens = clean_with_plan(table, plan)
    report.warnings.extend(new_token_warnings(report.new_tokens))
    typed = typed[[c for c in typed.columns if c in plan.columns]]
    return fit_plan(typed, plan, report), typed, report


def _role(name: str, fitted: FittedFill) -> str:
    if name in fitted.targets:
        return "imputed"
    if name in fitted.encoding.kinds:
        return "feature"
    return "dropped" if fitted.plan.columns[name].action == "drop" else "passed"


def _schema(fitted: FittedFill, typed: pd.DataFrame) -> dict[str, dict[str, Any]]:
    work = fitted.encoding.encode(typed)
    schema = {}
    for name in typed.columns:
        col = fitted.plan.columns[name]
        entry: dict[str, Any] = {"kind": col.kind, "action": col.action,
                                 "role": _role(name, fitted), "dtype": str(typed[name].dtype)}
        if name in fitted.encoding.categories:
            # plain JSON values, for people (the encoding keeps the exact numpy types)
            entry["labels"] = [_plain(v) for v in fitted.encoding.categories[name]]
            mode = most_frequent(work[name])
            entry["mode"] = None if mode is np.nan else _plain(mode)
        schema[name] = entry
    return schema


def _plain(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def save_model(
    fitted: FittedFill,
    path: str | os.PathLike[str],
    typed: pd.DataFrame,
    *,
    source: Table | None = None,
    overwrite: bool = False,
) -> SavedModel:
    """Write a fitted plan to a model directory, atomically.

    Parameters
    ----------
    fitted : FittedFill
    path : path-like
        The model directory. It must not exist, be empty, or (with ``overwrite``) hold an
        imputelab model; any other directory is never touched.
    typed : DataFrame
        The cleaned table the plan was fitted on (its schema is recorded).
    source : Table, optional
        The training file (its name, format and fingerprint are recorded).
    overwrite : bool
        Replace an existing model.

    Returns
    -------
    SavedModel

    Raises
    ------
    TableIOError
        When the directory cannot be written, or already holds something.
    """
    path = Path(path)
    plan_bytes = fitted.plan.to_json().encode()
    training: dict[str, Any] = {"rows": len(typed)}
    if source is not None:
        training.update(file=source.path.name, format=source.format,
                        fingerprint=f"sha256:{source.fingerprint}")
    model = SavedModel(fitted=fitted, schema=_schema(fitted, typed), training=training,
                       versions=_versions(), plan_fingerprint=f"sha256:{_sha256(plan_bytes)}",
                       created=datetime.now(UTC).isoformat(timespec="seconds"), path=path)
    store = _Store()
    enc = fitted.encoding
    body = {
        "format": MODEL_FORMAT, "version": MODEL_VERSION, "created": model.created,
        "versions": model.versions, "plan_fingerprint": model.plan_fingerprint,
        "training": training, "schema": store.encode(model.schema),
        "encoding": store.encode({"kinds": enc.kinds, "categories": enc.categories,
                                  "ranges": enc.ranges, "integer": enc.integer,
                                  "resolution": enc.resolution, "decimals": enc.decimals}),
        "targets": list(fitted.targets),
        "groups": [store.encode({"method": g.method_name, "params": g.method.get_params(),
                                 "columns": g.columns, "joint": g.joint, "edited": g.edited,
                                 "state": g.method._export_state()}) for g in fitted.groups],
    }
    files = {_MODEL: _json_bytes(body), _PLAN: plan_bytes}
    if store.arrays:
        buffer = io.BytesIO()
        np.savez(buffer, allow_pickle=False, **store.arrays)
        files[_ARRAYS] = buffer.getvalue()
    files.update({name: text.encode() for name, text in store.boosters.items()})
    manifest = {"format": MODEL_FORMAT, "version": MODEL_VERSION,
                "files": {name: _sha256(data) for name, data in sorted(files.items())}}
    files[_MANIFEST] = _json_bytes(manifest)
    _write_directory(path, files, overwrite=overwrite)
    return model


def _is_model(path: Path) -> bool:
    try:
        data = json.loads((path / _MANIFEST).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return False
    return isinstance(data, dict) and data.get("format") == MODEL_FORMAT


def _write_directory(path: Path, files: Mapping[str, bytes], *, overwrite: bool) -> None:
    """Write every file into a new directory beside ``path``, then rename it into place."""
    replace = False
    if path.is_dir() and any(path.iterdir()):
        if not _is_model(path):
            raise TableIOError(f"{param('model')} '{path}' is a folder that holds other files; "
                               "give a new or empty folder (imputelab only replaces its own "
                               "models)")
        if not overwrite:
            raise TableIOError(f"{param('model')} '{path}' already holds a model; pass "
                               f"{param('overwrite')} to replace it")
        replace = True
    elif path.exists() and not path.is_dir():
        raise TableIOError(f"{param('model')} '{path}' is a file; give a folder path")
    try:
        with atomic_dir(path, replace=replace) as tmp:
            for name, data in files.items():
                target = tmp / name
                target.parent.mkdir(exist_ok=True)
                target.write_bytes(data)
    except OSError as exc:
        raise TableIOError(f"cannot write model '{path}': {exc.strerror or exc}") from None


# ------------------------------------------------------------------------------ loading

def load_model(path: str | os.PathLike[str], *, option: str = param("model")) -> SavedModel:
    """Read a model directory written by :func:`save_model`, checking every file.

    Nothing in the directory is executed: JSON, numeric arrays (``allow_pickle=False``) and
    LightGBM text models are parsed as data, and only registered methods and trusted
    scikit-learn classes are built.

    Raises
    ------
    PlanError
        When the directory is missing, is not a model, is of another format version, has a
        file that does not match its manifest, or holds anything that is not plain data.
    """
    path = Path(path)
    where = f"{option} '{path}'"
    if not path.exists():
        raise PlanError(f"{where}: no such model folder; make one with 'imputelab fit'")
    if not path.is_dir():
        raise PlanError(f"{where} is not a folder; give the folder 'imputelab fit' wrote")
    files = _verified_files(path, where)
    body = _parse_json(files[_MODEL], f"{where}: {_MODEL}")
    _check_format(body, f"{where}: {_MODEL}")
    fingerprint = f"sha256:{_sha256(files[_PLAN])}"
    if body.get("plan_fingerprint") != fingerprint:
        raise PlanError(f"{where}: {_PLAN} is not the plan the model was fitted from "
                        "(plan fingerprint differs); fit the model again")
    plan = Plan.from_dict(_parse_json(files[_PLAN], f"{where}: {_PLAN}"),
                          origin=f"{where}: {_PLAN}")
    arrays = _load_arrays(files[_ARRAYS], where) if _ARRAYS in files else {}
    boosters = {}
    for name, data in files.items():
        if name.startswith("boosters/"):
            try:
                boosters[name] = data.decode("utf-8")
            except UnicodeDecodeError:
                raise PlanError(f"{where}: {name} is not a LightGBM text model") from None
    store = _Store(arrays, boosters)
    try:
        model = _build(body, plan, store, path)
    except ImputelabError as exc:
        raise PlanError(f"{where}: {exc}") from None
    except (KeyError, TypeError, ValueError, IndexError, AttributeError) as exc:
        raise PlanError(f"{where}: {_MODEL} is malformed ({type(exc).__name__}: "
                        f"{str(exc)[:120]}); fit the model again") from None
    except lgb.basic.LightGBMError as exc:
        raise PlanError(f"{where}: a LightGBM model cannot be read "
                        f"({str(exc).splitlines()[0][:120]}); fit the model again") from None
    model.warnings.extend(_version_warnings(model.versions))
    return model


def _parse_json(data: bytes, origin: str) -> Any:
    try:
        return json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise PlanError(f"{origin} is not valid JSON ({exc}); fit the model again") from None


def _check_format(data: Any, origin: str) -> None:
    if not isinstance(data, dict) or data.get("format") != MODEL_FORMAT:
        raise PlanError(f"{origin} is not an imputelab model (no \"format\": "
                        f"\"{MODEL_FORMAT}\")")
    if data.get("version") != MODEL_VERSION:
        raise PlanError(f"{origin} is model version {data.get('version')!r}; this imputelab "
                        f"reads version {MODEL_VERSION}: fit the model again")


def _verified_files(path: Path, where: str) -> dict[str, bytes]:
    """Every file of the model, read once and checked against the manifest."""
    if not (path / _MANIFEST).is_file():
        raise PlanError(f"{where} is not an imputelab model (no {_MANIFEST}); make one with "
                        "'imputelab fit'")
    manifest = _parse_json((path / _MANIFEST).read_bytes(), f"{where}: {_MANIFEST}")
    _check_format(manifest, f"{where}: {_MANIFEST}")
    listed = manifest.get("files")
    if not isinstance(listed, dict) or not all(
            isinstance(k, str) and isinstance(v, str) for k, v in listed.items()):
        raise PlanError(f"{where}: {_MANIFEST} has no \"files\" object; fit the model again")
    unsafe = [k for k in listed if not _SAFE_PATH.match(k) or k == _MANIFEST]
    if unsafe:
        raise PlanError(f"{where}: {_MANIFEST} lists an unexpected path '{unsafe[0]}'")
    present = set()
    for root, dirs, names in os.walk(path):
        for name in [*names, *(d for d in dirs if os.path.islink(os.path.join(root, d)))]:
            rel = Path(root, name).relative_to(path).as_posix()
            if rel != _MANIFEST:
                present.add(rel)
    extra = sorted(present - set(listed))
    if extra:
        raise PlanError(f"{where} holds files its manifest does not list: {', '.join(extra)}; "
                        "remove them or fit the model again")
    lacking = sorted(set(listed) - present)
    if lacking:
        raise PlanError(f"{where} lacks files its manifest lists: {', '.join(lacking)}; fit "
                        "the model again")
    for required in (_MODEL, _PLAN):
        if required not in listed:
            raise PlanError(f"{where}: {_MANIFEST} does not list {required}; fit the model "
                            "again")
    files = {}
    for name in sorted(listed):
        file = path / name
        if file.is_symlink() or not file.is_file():
            raise PlanError(f"{where}: {name} is not a regular file")
        data = file.read_bytes()
        if _sha256(data) != listed[name].lower():
            raise PlanError(f"{where}: {name} was changed after the model was saved (its "
                            "SHA-256 does not match the manifest); fit the model again")
        files[name] = data
    return files


def _load_arrays(data: bytes, where: str) -> dict[str, np.ndarray]:
    try:
        with np.load(io.BytesIO(data), allow_pickle=False) as archive:
            return {key: archive[key] for key in archive.files}
    except ValueError as exc:
        if "pickle" in str(exc).lower():
            raise PlanError(f"{where}: {_ARRAYS} holds pickled Python objects; imputelab never "
                            "loads those (a model is plain data), so it refuses this one"
                            ) from None
        raise PlanError(f"{where}: {_ARRAYS} is unreadable ({exc})") from None
    except (OSError, EOFError, zipfile.BadZipFile) as exc:
        raise PlanError(f"{where}: {_ARRAYS} is unreadable ({exc}); fit the model again"
                        ) from None


def _build(body: dict[str, Any], plan: Plan, store: _Store, path: Path) -> SavedModel:
    enc = store.decode(body["encoding"])
    encoding = Encoding(kinds=dict(enc["kinds"]), categories=dict(enc["categories"]),
                        ranges=dict(enc["ranges"]), integer=dict(enc["integer"]),
                        resolution=dict(enc["resolution"]), decimals=dict(enc["decimals"]))
    targets = list(body["targets"])
    wrong = [n for n in targets if n not in plan.columns or plan.columns[n].action != "impute"
             or n not in encoding.kinds]
    if wrong:
        raise ValueError(f"column '{wrong[0]}' is imputed by the model but not by its plan")
    groups = []
    for raw in body["groups"]:
        group = store.decode(raw)
        cls = METHODS.get(group["method"])
        if cls is None:
            raise ValueError(f"unknown method '{group['method']}'")
        method = cls(**group["params"])._import_state(group["state"])
        if not set(group["columns"]) <= set(targets):
            raise ValueError(f"{group['method']} fills columns that are not imputed")
        groups.append(_Group(group["method"], list(group["columns"]), list(group["joint"]),
                             method, dict(group["edited"])))
    fitted = FittedFill(plan=plan, encoding=encoding, targets=targets, groups=groups)
    return SavedModel(fitted=fitted, schema=store.decode(body["schema"]),
                      training=dict(body["training"]), versions=dict(body["versions"]),
                      plan_fingerprint=body["plan_fingerprint"],
                      created=str(body.get("created", "")), path=path)


def _version_warnings(saved: Mapping[str, str]) -> list[str]:
    now = _versions()
    changed = [f"{k} {saved[k]} (now {now[k]})" for k in _LIBRARIES
               if k in saved and saved[k] != now[k]]
    if not changed:
        return []
    return [f"model was saved with {', '.join(changed)}; fills may differ slightly from the "
            "ones the saved methods gave; fit it again to be sure"]
