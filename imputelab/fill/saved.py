"""Saved models: a fitted plan written as plain data, and filling new files with it.

A model is a directory that loads without running any code from it: no pickle anywhere.
Fitted numbers are JSON and one ``.npz`` of numeric arrays (read with
``allow_pickle=False``), LightGBM models are LightGBM's own text format, and scikit-learn
estimators are rebuilt from their parameters and fitted arrays, only for the classes in
:data:`imputelab.methods.state.TRUSTED_ESTIMATORS`::

    DIR/
      manifest.json    {"format": "imputelab-model", "version": 1,
                        "files": {PATH: SHA-256 hex, ...}}   every other file, checked on load
      model.json       format, version, created, library versions, plan fingerprint, training
                       file (name, format, fingerprint, rows), training schema (per column:
                       kind, action, role, dtype, labels and most frequent label), encoding,
                       fitted methods (name, params, columns, state)
      plan.json        the plan, as ``Plan.to_json()`` wrote it (its SHA-256 is the plan
                       fingerprint)
      arrays.npz       numeric arrays the state refers to as {"$array": KEY}
      boosters/bN.txt  LightGBM models the state refers to as {"$booster": PATH}

Inside ``model.json`` a JSON object with a key that starts with one ``$`` is a reference or a
typed value (``$array``, ``$booster``, ``$np``: a numpy scalar, ``$float``: NaN or an
infinity, ``$tuple``); a key of the data itself that starts with ``$`` is written with one
more ``$``. The manifest guards against damage, not against a forger: safety comes from the
formats, which hold data only.

``save_model`` writes the directory beside its target and renames it into place; it writes
into a new or empty folder, replaces an imputelab model only when asked (``overwrite``), and
never touches a folder holding anything else.

A new file is checked before it is filled (:func:`fill_with_model`):

- a column the model uses (imputed or feature) missing from the file is an error; a missing
  column it does not use (passed through or dropped) is a warning;
- a column the model does not know is passed through unchanged, with a warning;
- a column whose values changed sort is an error naming it, with examples: text that is
  neither a number (or a timestamp in the column's format) nor a missing token, or labels of
  another type (numbers where the model saw text);
- labels the model never saw, in observed cells, are counted and handled by ``unseen``:
  ``keep`` (the default: the cell is written as it is, the models read it as unknown),
  ``missing`` (filled as a hole by the column's method) or ``mode`` (the column's most
  frequent training label); an observed cell changes only when the caller asks;
- a column the model uses that is blank in every row is filled entirely, with a warning.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
import platform
import re
import zipfile
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path
from typing import Any

import lightgbm as lgb
import numpy as np
import pandas as pd

from imputelab.checks import check_choice
from imputelab.errors import (
    DataError,
    ImputelabError,
    PlanError,
    TableIOError,
    param,
)
from imputelab.fill.frame import (
    FillReport,
    FittedFill,
    _Group,
    _specs,
    check_plan,
    clean_with_plan,
    fit_plan,
    missing_indicators,
    render_text,
)
from imputelab.frame.encoding import Encoding
from imputelab.io.columns import MISSING_TOKENS, new_token_warnings
from imputelab.io.tables import Table, atomic_dir
from imputelab.methods import METHODS
from imputelab.methods.simple import most_frequent
from imputelab.methods.state import BoosterText
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

MODEL_FORMAT = "imputelab-model"
MODEL_VERSION = 1
#: What :func:`fill_with_model` does with a label the model never saw, in an observed cell.
UNSEEN_CHOICES = ("keep", "missing", "mode")
_MANIFEST, _MODEL, _PLAN, _ARRAYS = "manifest.json", "model.json", "plan.json", "arrays.npz"
_SAFE_PATH = re.compile(r"^[a-z0-9_]+(\.[a-z0-9]+)?(/[a-z0-9_]+\.[a-z0-9]+)?$")
_LIBRARIES = {"imputelab": "imputelab", "numpy": "numpy", "pandas": "pandas",
              "scikit-learn": "scikit-learn", "lightgbm": "lightgbm", "pyarrow": "pyarrow"}
# numpy scalar types a model may hold; nothing else is ever turned into a type
_SCALARS = {name: np.dtype(name).type for name in (
    "bool", "int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64",
    "float16", "float32", "float64")}
_FLOATS = {"nan": np.nan, "inf": math.inf, "-inf": -math.inf}


@dataclass
class SavedModel:
    """A fitted plan with what it was fitted on: what a model directory holds.

    Attributes
    ----------
    fitted : FittedFill
    schema : dict
        Per training column: ``kind``, ``action``, ``role`` (``imputed``, ``feature``,
        ``passed`` or ``dropped``), ``dtype`` (as text), and for label columns the model uses
        ``labels`` and ``mode`` (the most frequent training label).
    training : dict
        The training file: ``file``, ``format``, ``fingerprint``, ``rows``.
    versions : dict
        Library versions the model was fitted with.
    plan_fingerprint : str
        ``sha256:`` of the plan's JSON bytes (``plan.json``).
    created : str
        When it was saved (UTC, ISO 8601).
    path : Path or None
        Where it was saved or loaded from.
    warnings : list of str
        What loading noticed (other library versions).
    """

    fitted: FittedFill
    schema: dict[str, dict[str, Any]]
    training: dict[str, Any]
    versions: dict[str, str]
    plan_fingerprint: str
    created: str = ""
    path: Path | None = None
    warnings: list[str] = field(default_factory=list)

    @property
    def plan(self) -> Plan:
        """The plan the model was fitted from."""
        return self.fitted.plan


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


def _versions() -> dict[str, str]:
    found = {}
    for key, dist in _LIBRARIES.items():
        try:
            found[key] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            found[key] = "unknown"
    found["python"] = platform.python_version()
    return found


# ------------------------------------------------------------------------ plain-data codec

class _Store:
    """Arrays and booster texts pulled out of (or put back into) a state tree."""

    def __init__(self, arrays: Mapping[str, np.ndarray] | None = None,
                 boosters: Mapping[str, str] | None = None):
        self.arrays = dict(arrays or {})
        self.boosters = dict(boosters or {})

    def encode(self, value: Any) -> Any:
        """A state tree as JSON-ready data."""
        if isinstance(value, BoosterText):
            key = f"boosters/b{len(self.boosters)}.txt"
            self.boosters[key] = str(value)
            return {"$booster": key}
        if value is None or isinstance(value, bool | int | str):
            return value
        if isinstance(value, float):
            return value if math.isfinite(value) else {"$float": repr(value)}
        if isinstance(value, np.ndarray):
            if value.dtype.kind not in "biufU":  # objects would need pickle
                raise DataError(f"an array of type {value.dtype} cannot be saved in a model")
            key = f"a{len(self.arrays)}"
            self.arrays[key] = value
            return {"$array": key}
        if isinstance(value, np.str_):
            return str(value)
        if isinstance(value, np.generic):
            if value.dtype.name not in _SCALARS:
                raise DataError(f"a value of type {value.dtype} cannot be saved in a model")
            return {"$np": value.dtype.name, "value": self.encode(value.item())}
        if isinstance(value, tuple):
            return {"$tuple": [self.encode(v) for v in value]}
        if isinstance(value, list):
            return [self.encode(v) for v in value]
        if isinstance(value, dict):
            out = {}
            for key, item in value.items():
                if not isinstance(key, str):
                    raise DataError(f"a key of type {type(key).__name__} cannot be saved in "
                                    "a model")
                out["$" + key if key.startswith("$") else key] = self.encode(item)
            return out
        raise DataError(f"a value of type {type(value).__name__} ({value!r:.40}) cannot be "
                        "saved in a model")

    def decode(self, data: Any) -> Any:
        """Inverse of :meth:`encode`."""
        if isinstance(data, list):
            return [self.decode(v) for v in data]
        if not isinstance(data, dict):
            return data
        marks = [k for k in data if k.startswith("$") and not k.startswith("$$")]
        if not marks:
            return {(k[1:] if k.startswith("$") else k): self.decode(v) for k, v in data.items()}
        mark, ref = marks[0], data[marks[0]]
        if mark == "$array" and ref in self.arrays:
            return self.arrays[ref]
        if mark == "$booster" and ref in self.boosters:
            return BoosterText(self.boosters[ref])
        if mark == "$float" and ref in _FLOATS:
            return _FLOATS[ref]
        if mark == "$tuple" and isinstance(ref, list):
            return tuple(self.decode(v) for v in ref)
        if mark == "$np" and ref in _SCALARS and "value" in data:
            return _SCALARS[ref](self.decode(data["value"]))
        raise ValueError(f"bad reference {json.dumps(data)[:80]}")


# ------------------------------------------------------------------------------- saving

def _json_bytes(data: Any) -> bytes:
    return (json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode()


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


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


# ------------------------------------------------------------------------------ filling

@dataclass
class ModelFillReport(FillReport):
    """What a fill with a saved model did: a :class:`FillReport` and the new-file checks.

    Attributes
    ----------
    unseen : dict
        Per label column, labels the model never saw in observed cells, with counts.
    unseen_action : str
        What was done with them (see :data:`UNSEEN_CHOICES`).
    extra_columns : list of str
        Columns the model does not know, passed through unchanged.
    blank_columns : list of str
        Columns the model uses that are blank in every row of the file.
    """

    unseen: dict[str, dict[str, int]] = field(default_factory=dict)
    unseen_action: str = "keep"
    extra_columns: list[str] = field(default_factory=list)
    blank_columns: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict."""
        return {**super().to_dict(), "unseen": self.unseen, "unseen_action": self.unseen_action,
                "extra_columns": self.extra_columns, "blank_columns": self.blank_columns}


def _family(dtype: Any) -> str:
    """The sort of values a column holds; labels only match labels of the same sort."""
    if isinstance(dtype, str):
        try:
            dtype = pd.api.types.pandas_dtype(dtype)
        except TypeError:
            return dtype
    if isinstance(dtype, pd.CategoricalDtype):
        return "category"
    if pd.api.types.is_bool_dtype(dtype):
        return "bool"
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return "datetime"
    if pd.api.types.is_numeric_dtype(dtype):
        return "number"
    if pd.api.types.is_string_dtype(dtype):
        return "text"
    return str(dtype)


def _shown(counts: Mapping[Any, int], limit: int = 5) -> str:
    items = sorted(counts.items(), key=lambda kv: (-kv[1], str(kv[0])))
    text = ", ".join(f"'{k}' ({v})" for k, v in items[:limit])
    return text + (f" and {len(items) - limit} more" if len(items) > limit else "")


def _check_columns(table: Table, model: SavedModel, report: ModelFillReport) -> None:
    columns = list(table.frame.columns)
    used = model.fitted.encoding.columns
    missing = [c for c in model.schema if c not in columns]
    needed = [c for c in missing if c in used]
    if needed:
        raise DataError(f"'{table.path}' lacks column(s) the model uses: {', '.join(needed)}; "
                        "give a file with every column it was fitted on")
    if missing:
        report.warnings.append(f"'{table.path}' lacks column(s) {', '.join(missing)}, which "
                               "the model does not use; the output has none")
    report.extra_columns = [c for c in columns if c not in model.schema]
    if report.extra_columns:
        report.warnings.append(f"column(s) {', '.join(report.extra_columns)} were not in the "
                               "training file; passed through unchanged")


def _check_values(typed: pd.DataFrame, new_tokens: Mapping[str, Mapping[str, int]],
                  model: SavedModel, report: ModelFillReport) -> None:
    """Errors for columns whose values changed sort; warnings for the rest."""
    for name in model.fitted.encoding.columns:
        entry = model.schema[name]
        was, now = _family(entry["dtype"]), _family(typed[name].dtype)
        if was != now and typed[name].notna().any():  # all blank: no values, any type
            sample = ", ".join(f"'{v}'" for v in pd.unique(typed[name].dropna())[:3])
            raise DataError(f"column '{name}' held {was} values when the model was fitted and "
                            f"holds {now} values in this file (e.g. {sample or 'blanks'}); "
                            "give it in the same form")
        if entry["kind"] in ("numeric", "datetime"):
            found = new_tokens.get(name, {})
            strange = {t: c for t, c in found.items()
                       if t.strip().lower() not in MISSING_TOKENS}
            if strange:
                what = "a number" if entry["kind"] == "numeric" else "a timestamp"
                raise DataError(f"column '{name}' was {entry['kind']} when the model was fitted, "
                                f"but this file holds text that is neither {what} nor a known "
                                f"missing token: {_shown(strange)}; fix those cells, or record "
                                "them as missing codes in the plan and fit again")
    report.warnings.extend(new_token_warnings(new_tokens))
    for name in model.fitted.encoding.columns:
        if typed[name].isna().all():
            report.blank_columns.append(name)
    if report.blank_columns:
        report.warnings.append(f"column(s) {', '.join(report.blank_columns)} are blank in every "
                               "row of this file; every value the model fills there is an "
                               "estimate, none is measured")


def _unseen_cells(typed: pd.DataFrame, model: SavedModel) -> dict[str, np.ndarray]:
    cells = {}
    for name, labels in model.fitted.encoding.categories.items():
        column = typed[name]
        # the same test Encoding.encode applies: these cells are unknown to every model
        unknown = (~column.astype(object).isin(labels) & column.notna()).to_numpy(bool)
        if unknown.any():
            cells[name] = unknown
    return cells


def fill_with_model(
    table: Table,
    model: SavedModel,
    *,
    unseen: str = "keep",
    text_output: bool = True,
) -> tuple[pd.DataFrame, ModelFillReport]:
    """Check a new table against a saved model, clean it by the model's plan and fill it.

    The methods are not refitted. The output is built exactly as :func:`imputelab.fill.frame.
    fill_table` builds it, so on the training file both give the same table.

    Parameters
    ----------
    table : Table
    model : SavedModel
    unseen : {"keep", "missing", "mode"}
        What to do with an observed label the model never saw, in a column it imputes:
        ``keep`` writes the cell as it is (the models read it as unknown when they fill the
        other columns), ``missing`` treats it as a hole and fills it by the column's method,
        ``mode`` replaces it by the column's most frequent training label. Replaced cells are
        counted in the report and flagged 1 in the column's ``__was_missing`` indicator.
        Labels of columns that only serve as features (the target) are always kept.
    text_output : bool
        For CSV input, return the original text with filled cells rewritten (for CSV output);
        otherwise the typed frame (for Parquet output).

    Returns
    -------
    frame : DataFrame
    report : ModelFillReport

    Raises
    ------
    DataError
        For a missing column the model uses, or a column whose values changed sort.
    """
    check_choice(unseen, "unseen", UNSEEN_CHOICES)
    plan, fitted = model.plan, model.fitted
    report = ModelFillReport(unseen_action=unseen)
    report.warnings.extend(model.warnings)
    _check_columns(table, model, report)
    typed, report.new_tokens = clean_with_plan(table, plan)
    _check_values(typed, report.new_tokens, model, report)
    before = typed
    for name, cells in _unseen_cells(typed, model).items():
        column = typed[name]
        report.unseen[name] = {str(k): int(v) for k, v in
                               column[cells].astype(object).value_counts().items()}
        if unseen == "keep" or name not in fitted.targets:
            continue
        hole = column.mask(pd.Series(cells, index=column.index))
        before = before.assign(**{name: hole})
        if unseen == "missing":
            typed = typed.assign(**{name: hole})
        elif model.schema[name].get("mode") is not None:
            typed = typed.assign(**{name: column.mask(pd.Series(cells, index=column.index),
                                                      model.schema[name]["mode"])})
    if report.unseen:
        done = {"keep": "kept as written (unknown to the models)",
                "missing": "treated as holes and filled",
                "mode": "replaced by the column's most frequent training label"}[unseen]
        for name, counts in report.unseen.items():
            how = done if name in fitted.targets else "kept as written (a feature only)"
            report.warnings.append(f"column '{name}': {sum(counts.values())} cell(s) hold labels "
                                   f"the model never saw: {_shown(counts)}; {how}")
    planned = [c for c in typed.columns if c in plan.columns]
    filled = fitted.apply(typed[planned], report)
    for name in typed.columns:  # columns the model does not know pass through in place
        if name not in plan.columns:
            filled[name] = typed[name]
    filled = filled[[c for c in typed.columns if c in filled.columns]]
    flags = missing_indicators(before, plan, filled.columns)
    if table.is_text and text_output:
        out = render_text(table, before, filled, _specs(plan))
        return pd.concat([out, flags.astype("str")], axis=1), report
    return pd.concat([filled, flags], axis=1), report
