"""``fill --draws M`` and ``fill --stream``: many completed tables, and chunked fills."""

from __future__ import annotations

import pytest
from cli_helpers import invoke, load, ok, read_cells

from imputelab.fill.pooling import pool


@pytest.fixture(autouse=True)
def _one_thread(single_blas_thread: None) -> None:
    return None


def test_draws_write_m_tables_that_differ_only_where_the_file_was_blank(
        trip_log_csv, trip_log_plan, tmp_path):
    out_dir = tmp_path / "draws"
    result = ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--draws", 3,
                       "--out", out_dir))
    assert "Wrote 3 completed tables" in result.stdout
    info = load(out_dir / "draws.json")
    assert info["m"] == 3 and info["files"] == [f"trips_draw0{i}.csv" for i in (1, 2, 3)]
    header, source = read_cells(trip_log_csv)
    tables = [read_cells(out_dir / name)[1] for name in info["files"]]
    i = header.index("fuel_l")  # chained-linear or a tree method: both draw
    blank = [row[i] == "" for row in source]
    assert sum(blank) > 10
    for rows in tables:
        for cell_in, row in zip(source, rows, strict=True):
            if cell_in[i] != "":
                assert row[i] == cell_in[i]  # observed cells are never changed
    drawn = [[float(rows[r][i]) for r in range(len(rows)) if blank[r]] for rows in tables]
    assert drawn[0] != drawn[1] != drawn[2]  # fresh draws, not copies
    # The files are meant for Rubin's rules: the mean of fuel_l pools to a finite interval.
    means = [sum(float(row[i]) for row in rows) / len(rows) for rows in tables]
    variances = [1.0] * 3
    assert pool(means, variances).se > 0


def test_draws_need_a_folder_and_at_least_two(trip_log_csv, trip_log_plan, tmp_path):
    for args, message in (([2, "--out", tmp_path / "x.csv"], "give a folder"),
                          ([1, "--out", tmp_path / "d"], "at least 2")):
        result = invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--draws", *args)
        assert result.exit_code == 2
        assert message in result.stderr and "Traceback" not in result.stderr


def test_fill_stream_writes_the_same_bytes_as_the_in_memory_fill(
        trip_log_csv, trip_log_plan, tmp_path):
    whole, chunked = tmp_path / "whole.csv", tmp_path / "chunked.csv"
    ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", whole, "-q"))
    result = ok(invoke("fill", trip_log_csv, "--plan", trip_log_plan, "--out", chunked,
                       "--stream", "--chunk-rows", 70))
    assert "chunk by chunk" in result.stdout
    assert chunked.read_bytes() == whole.read_bytes()


def test_fill_stream_refuses_what_needs_the_whole_file(trip_log_csv, tmp_path):
    result = invoke("fill", trip_log_csv, "--model", tmp_path / "m", "--out", tmp_path / "o.csv",
                    "--stream", "--unseen", "mode")
    assert result.exit_code == 2 and "--no-stream" in result.stderr
