"""What a saved model is on disk: its files, the plain-data codec of fitted state, SavedModel.

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
"""

from __future__ import annotations

import hashlib
import json
import math
import platform
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np

from imputelab.errors import DataError
from imputelab.fill.frame import FittedFill
from imputelab.methods.state import BoosterText
from imputelab.score.plan import Plan

__all__ = ["MODEL_FORMAT", "MODEL_VERSION", "SavedModel"]

MODEL_FORMAT = "imputelab-model"
MODEL_VERSION = 1
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


def _json_bytes(data: Any) -> bytes:
    return (json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode()


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()
