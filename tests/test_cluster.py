"""The experiment and the fill on Dask give what they give on one machine.

One LocalCluster (2 worker processes on 127.0.0.1, no dashboard) serves the whole module.
"""

from __future__ import annotations

import json
import os
import signal
import time
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from cli_helpers import invoke, load, ok
from distributed import Client
from threadpoolctl import threadpool_limits

from imputelab.bench.demo_data import make_trip_log, write_trip_log
from imputelab.errors import OptionError
from imputelab.executors.pool import (
    DaskExecutor,
    JoblibExecutor,
    SerialExecutor,
    local_cluster,
    parse_cluster,
    worker_result,
)
from imputelab.fill.frame import clean_with_plan, fill_table, fit_plan
from imputelab.fill.partitioned import _csv_pieces, _read_piece, cluster_fill
from imputelab.io.tables import read_table
from imputelab.score.build import ScoreOptions, score_table
from imputelab.survey.table import SurveyOptions

ROWS = 300
OPTIONS = ScoreOptions(survey=SurveyOptions(missing_codes={"driver_rating": [99]},
                                            diagnostics=False),
                       methods=["mean", "mode", "knn", "chained-linear"],
                       masks=["mcar", "mar"], repeats=2, downstream=False)


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    with threadpool_limits(limits=1):
        yield


@pytest.fixture(scope="module")
def client():
    with local_cluster(2) as cluster, Client(cluster) as connected:
        yield connected


@pytest.fixture(scope="module")
def trips(tmp_path_factory) -> tuple[Path, object]:
    path = write_trip_log(tmp_path_factory.mktemp("trips") / "trips.csv", n_trips=ROWS)
    table = read_table(path)
    plan, _, _ = score_table(table, OPTIONS, executor=SerialExecutor())
    return path, plan


def test_the_plan_is_the_same_with_one_job_two_jobs_and_a_cluster(trips, client):
    path, plan = trips
    table = read_table(path)
    for executor in (JoblibExecutor(2), DaskExecutor(client)):
        again, _, _ = score_table(table, OPTIONS, executor=executor)
        assert again.to_json() == plan.to_json()
    assert any(col.scores for col in plan.columns.values())  # the grid did run


def test_a_worker_killed_during_the_run_does_not_change_the_plan(trips, client):
    path, plan = trips
    before = client.run(os.getpid)
    killed = []

    def progress(done: int, total: int) -> None:
        if done == 2 and not killed:  # the other worker is busy with a task now
            victim = sorted(before)[0]
            os.kill(before[victim], signal.SIGKILL)
            killed.append(victim)

    again, _, result = score_table(read_table(path), OPTIONS, executor=DaskExecutor(client),
                                   progress=progress)
    assert killed and again.to_json() == plan.to_json()
    assert not result.failures
    client.wait_for_workers(2, timeout=60)  # the nanny restarted it
    deadline = time.monotonic() + 30
    while set(client.run(os.getpid).values()) & {before[killed[0]]}:
        assert time.monotonic() < deadline
        time.sleep(0.2)


def fitted_on(path: Path, plan):
    table = read_table(path)
    typed, _ = clean_with_plan(table, plan)
    return fit_plan(typed[[c for c in typed.columns if c in plan.columns]], plan)


def folder_frame(folder: Path) -> pd.DataFrame:
    parts = sorted(folder.glob("*.parquet"))
    return pa.concat_tables([pq.read_table(p) for p in parts]).to_pandas()


def single_machine(path: Path, plan) -> pd.DataFrame:
    frame, _ = fill_table(read_table(path), plan, text_output=False)
    return pa.Table.from_pandas(frame, preserve_index=False).to_pandas()


def test_a_csv_filled_on_the_cluster_has_the_single_machine_values(trips, client, tmp_path):
    path, plan = trips
    report = cluster_fill(path, tmp_path / "out", fitted_on(path, plan), plan, client,
                          partition_bytes=9_000)
    assert len(list((tmp_path / "out").glob("part-*.parquet"))) > 3  # several partitions
    expected = single_machine(path, plan)
    pd.testing.assert_frame_equal(folder_frame(tmp_path / "out"), expected)
    _, memory = fill_table(read_table(path), plan, text_output=False)
    assert report.filled == memory.filled and sum(report.filled.values()) > 0
    assert not list(tmp_path.glob(".out.*"))  # the temporary folder is gone
    umask = os.umask(0)
    os.umask(umask)
    assert (tmp_path / "out").stat().st_mode & 0o777 == 0o777 & ~umask  # not owner-only


def test_a_parquet_folder_filled_on_the_cluster_is_its_concatenation_filled(
        trips, client, tmp_path):
    path, plan = trips
    typed, _ = clean_with_plan(read_table(path), plan)
    typed["depot"] = typed["depot"].astype("category")  # labels as dictionary columns
    folder, whole = tmp_path / "in", tmp_path / "whole.parquet"
    folder.mkdir()
    for i, rows in enumerate(((0, 120), (120, 121), (121, ROWS))):
        part = pa.Table.from_pandas(typed.iloc[slice(*rows)], preserve_index=False)
        pq.write_table(part, folder / f"{i}.parquet", row_group_size=60)
    pq.write_table(pa.Table.from_pandas(typed, preserve_index=False), whole)
    whole_plan, _, _ = score_table(read_table(whole), OPTIONS, executor=SerialExecutor())
    report = cluster_fill(folder, tmp_path / "out", fitted_on(whole, whole_plan), whole_plan,
                          client)
    assert len(list((tmp_path / "out").glob("part-*.parquet"))) == 2 + 1 + 3  # row groups
    pd.testing.assert_frame_equal(folder_frame(tmp_path / "out"),
                                  single_machine(whole, whole_plan))
    assert sum(report.filled.values()) > 0


def test_csv_pieces_cut_between_rows_even_inside_quoted_line_breaks(tmp_path):
    frame = make_trip_log(300, seed=3)
    frame.loc[::7, "remark"] = 'door "stuck",\nre-sealed'  # quotes, delimiter, line break
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    expected = read_table(path).frame.reset_index(drop=True)
    for size in (500, 4096, 10**6):
        pieces, delimiter, decimal = _csv_pieces(path, "FILE", size)
        got = pd.concat([_read_piece(p) for p in pieces], ignore_index=True)
        pd.testing.assert_frame_equal(got, expected)
        assert (delimiter, decimal) == (",", ".")
        assert len(pieces) == 1 if size == 10**6 else len(pieces) > 3


def test_a_stray_quote_inside_a_cell_is_refused(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("a,b\n1,5\"3\n2,x\n", encoding="utf-8")
    with pytest.raises(OptionError, match="quote inside an unquoted cell"):
        _csv_pieces(path, "FILE", 4)


def test_fill_cli_on_a_running_cluster_writes_a_parquet_folder(trips, client, tmp_path):
    path, plan = trips
    model = tmp_path / "model"
    plan.save(tmp_path / "plan.json")
    ok(invoke("fit", path, "--plan", tmp_path / "plan.json", "--model", model, "-q"))
    address = client.scheduler.address
    assert address.startswith("tcp://127.0.0.1:")
    result = ok(invoke("fill", path, "--model", model, "--out", tmp_path / "filled",
                       "--cluster", address, "--json"))
    assert json.loads(result.stdout)["cluster"] is True
    pd.testing.assert_frame_equal(folder_frame(tmp_path / "filled"), single_machine(path, plan))


def test_score_cli_with_a_local_cluster_writes_the_local_plan(trips, tmp_path):
    path, plan = trips
    result = ok(invoke("score", path, "--out", tmp_path / "cluster.json", "--cluster", "local:2",
                       "--missing-code", "driver_rating=99", "--no-checks", "--masks",
                       "mcar,mar", "--repeats", 2, "--methods", ",".join(OPTIONS.methods)))
    assert "Plan written" in result.stdout and "Port" not in result.stderr
    assert load(tmp_path / "cluster.json") == json.loads(plan.to_json())


@pytest.mark.parametrize("address, message", [
    ("tcp://127.0.0.1:9", "no scheduler answered"),
    ("127.0.0.1", "not a scheduler address"),
    ("local:0", "local:N needs a number of workers"),
    ("http://127.0.0.1:8786", "unknown protocol"),
])
def test_a_bad_cluster_address_is_one_line_and_exit_2(trips, tmp_path, address, message):
    path, _ = trips
    result = invoke("score", path, "--out", tmp_path / "p.json", "--cluster", address)
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "--cluster" in lines[0] and message in lines[0]
    assert not (tmp_path / "p.json").exists()


def test_parse_cluster_reads_local_and_addresses():
    assert parse_cluster("local:3") == ("local", 3)
    assert parse_cluster("scheduler:8786") == ("address", "tcp://scheduler:8786")
    assert parse_cluster("tls://10.0.0.1:8786") == ("address", "tls://10.0.0.1:8786")


def test_fill_cluster_options_that_cannot_work_are_refused_before_any_start(trips, tmp_path):
    path, plan = trips
    plan.save(tmp_path / "plan.json")
    folder = tmp_path / "folder"
    folder.mkdir()
    for args, message in (
            ([path, "--out", tmp_path / "o.csv"], "folder of Parquet files"),
            ([folder, "--out", tmp_path / "o"], "is a folder: fit the plan once"),
            ([path, "--out", tmp_path / "o", "--draws", 2], "does not go with --draws")):
        result = invoke("fill", *args, "--plan", tmp_path / "plan.json", "--cluster", "local:2")
        assert result.exit_code == 2, result.stderr
        assert message in result.stderr and "Traceback" not in result.stderr


def test_a_worker_that_cannot_import_imputelab_is_a_set_up_error():
    class Lost:
        def result(self):
            raise ModuleNotFoundError("No module named 'imputelab'")

    with pytest.raises(OptionError, match="install the same imputelab version"):
        worker_result(Lost())
