"""Every benchmark dataset's meta file agrees with the data its loader returns.

The facts come from each dataset's own documentation or from counts on the shipped copy;
each meta file says which, beside the facts.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from imputelab.bench.datasets import (
    META_DIR,
    dataset_names,
    gaussian_parameters,
    load_dataset,
    read_meta,
)

CALIFORNIA = Path(__file__).resolve().parents[2] / "shared" / "data" / "california_housing.csv"
NAMES = dataset_names()
REQUIRED = ("name", "loader", "rows", "columns", "kinds", "target", "source", "citation",
            "licence", "facts")


def _load(name: str):
    if name == "california" and not CALIFORNIA.is_file():
        pytest.skip("the California CSV is not beside the checkout")
    return load_dataset(name, california=CALIFORNIA)


def test_every_expected_dataset_has_a_meta_file() -> None:
    assert META_DIR.is_dir()
    assert set(NAMES) >= {"diabetes", "breast_cancer", "wine", "california", "ames",
                          "credit_data", "airquality", "penguins", "gaussian"}


@pytest.mark.parametrize("name", NAMES)
def test_meta_files_have_every_field(name: str) -> None:
    meta = read_meta(name)
    missing = [f for f in REQUIRED if f not in meta]
    assert not missing, f"{name}.toml lacks {missing}"
    assert meta["name"] == name
    assert {"package", "call"} <= set(meta["loader"])
    assert meta["target"] in meta["kinds"]
    assert set(meta["kinds"].values()) <= {"numeric", "binary", "categorical"}


@pytest.mark.parametrize("name", NAMES)
def test_facts_match_the_loaded_data(name: str) -> None:
    data = _load(name)
    meta, facts, frame = data.meta, data.meta["facts"], data.frame
    assert frame.shape == (meta["rows"], meta["columns"])
    assert len(frame) == facts["rows"]
    assert set(data.columns) <= set(frame.columns)
    assert set(data.columns) == set(meta["kinds"]) or name == "ames"
    for column, count in facts.get("missing", {}).items():
        assert int(frame[column].isna().sum()) == count, column
    if "missing_total" in facts:
        assert int(frame.isna().sum().sum()) == facts["missing_total"]
    if "complete_rows" in facts:
        assert int(frame.notna().all(axis=1).sum()) == facts["complete_rows"]
    for column, counts in facts.get("labels", {}).items():
        assert frame[column].value_counts().to_dict() == counts, column
    if "patterns" in facts:  # airquality: R documentation of the datasets package
        ozone, solar = frame["Ozone"].isna(), frame["Solar.R"].isna()
        assert int((~ozone & ~solar).sum()) == facts["patterns"]["complete"]
        assert int((ozone & ~solar).sum()) == facts["patterns"]["ozone_only"]
        assert int((~ozone & solar).sum()) == facts["patterns"]["solar_only"]
        assert int((ozone & solar).sum()) == facts["patterns"]["both"]
    for column, kind in data.kinds.items():
        values = frame[column].dropna()
        if kind == "numeric":
            assert values.dtype == float, column
        elif kind == "binary":
            assert values.nunique() == 2, column


def test_the_gaussian_sample_follows_its_known_parameters() -> None:
    data = _load("gaussian")
    facts = data.meta["facts"]
    mean, cov = gaussian_parameters()
    np.testing.assert_allclose(mean, facts["mean"])
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), facts["sd"])
    assert cov[0, 1] / np.sqrt(cov[0, 0] * cov[1, 1]) == pytest.approx(facts["rho"])
    values = data.frame.to_numpy()
    # Sample mean within 4 standard errors of mu (sd / sqrt(n)): a loose sampling bound.
    se = np.sqrt(np.diag(cov) / len(values))
    assert (np.abs(values.mean(axis=0) - mean) < 4 * se).all()
    corr = np.corrcoef(values, rowvar=False)
    # The sample correlation's SE is about (1 - rho^2) / sqrt(n) (Fisher 1915; from memory).
    assert abs(corr[0, 1] - facts["rho"]) < 4 * (1 - facts["rho"] ** 2) / np.sqrt(len(values))


def test_california_without_a_file_or_cache_is_skipped_with_a_note(tmp_path,
                                                                   monkeypatch) -> None:
    monkeypatch.setenv("SCIKIT_LEARN_DATA", str(tmp_path))
    data = load_dataset("california")
    assert data.frame.empty
    assert data.note.startswith("skipped")
