"""Shared fixtures: a small demo trip log and a cheap plan made from it."""

from __future__ import annotations

from pathlib import Path

import pytest
from threadpoolctl import threadpool_limits
from typer.testing import CliRunner

from imputelab.bench.demo_data import write_trip_log
from imputelab.cli import app

TRIP_LOG_ROWS = 300
# Cheap experiment settings: enough to exercise every command, a second or two per score run.
# One job, because starting worker processes costs more than the work on 300 rows.
FAST_SCORE_ARGS = ("--methods", "mean,median,mode,chained-linear", "--repeats", "1",
                   "--masks", "mcar", "--jobs", "1")


@pytest.fixture(scope="session")
def fast_score_args() -> tuple[str, ...]:
    """Options that make ``score`` cheap (see :data:`FAST_SCORE_ARGS`)."""
    return FAST_SCORE_ARGS


@pytest.fixture
def single_blas_thread():
    """Run the test with one BLAS/OpenMP thread.

    ``fill`` runs its models in the calling process without limiting threads; on a small table
    the BLAS threads cost far more than they save (seconds instead of a fraction of one).
    """
    with threadpool_limits(limits=1):
        yield


@pytest.fixture
def trip_log_csv(tmp_path: Path) -> Path:
    """A fresh 300-row demo trip log, ``trips.csv`` in the test's own folder.

    The generator is deterministic, so every copy has the same bytes (and fingerprint) as the
    file :func:`trip_log_plan` was scored on.
    """
    return write_trip_log(tmp_path / "trips.csv", n_trips=TRIP_LOG_ROWS)


@pytest.fixture(scope="session")
def trip_log_plan(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A plan scored once per session on the 300-row trip log with the cheap settings.

    Read it, or copy it before editing: it is shared by every test.
    """
    folder = tmp_path_factory.mktemp("trip_log_plan")
    data = write_trip_log(folder / "trips.csv", n_trips=TRIP_LOG_ROWS)
    plan = folder / "plan.json"
    with threadpool_limits(limits=1):
        result = CliRunner().invoke(
            app, ["score", str(data), "--out", str(plan), *FAST_SCORE_ARGS, "--quiet"]
        )
    assert result.exit_code == 0, result.stderr
    return plan
