"""Tests for fill.streamed: chunked fills equal the in-memory fill; reservoir samples.

The reference for every fill here is the in-memory path itself (read_table, fill_table,
write_table), which pandas' own reader and writer implement; the streamed output must match
it byte for byte (CSV) or value for value with the same schema (Parquet).
"""

from __future__ import annotations

import math
import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.stats import chisquare
from threadpoolctl import threadpool_limits

import imputelab.fill.chunks as chunks
import imputelab.fill.writing as writing
from imputelab.bench.demo_data import make_trip_log, write_trip_log
from imputelab.errors import DataError, OptionError, TableIOError
from imputelab.fill.frame import FillReport, clean_with_plan, fill_table, fit_plan
from imputelab.fill.streamed import fit_sample, reservoir_sample, stream_fill
from imputelab.io.columns import ColumnSpec
from imputelab.io.tables import read_table, write_table
from imputelab.score.build import ScoreOptions, score_table
from imputelab.score.plan import ColumnPlan, Plan
from imputelab.survey.table import SurveyOptions

CHEAP = ScoreOptions(masks=("mcar",), repeats=1, downstream=False,
                     methods=["mean", "median", "mode", "chained-linear"],
                     survey=SurveyOptions(missing_codes={"driver_rating": ["99"]}))
ROWS = 2000


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    # Tiny solves spread over BLAS threads are many times slower, not faster.
    with threadpool_limits(limits=1):
        yield


def scored(path: Path) -> tuple:
    table = read_table(path)
    plan, _, _ = score_table(table, CHEAP)
    for name in ("ambient_c", "depot"):  # indicator columns, beside the plan's own
        plan.columns[name].indicator = True
    return table, plan


def fitted_on(table, plan):
    """Fitted exactly as fill_table fits with fit_on=table."""
    typed, _ = clean_with_plan(table, plan)
    return fit_plan(typed[[c for c in typed.columns if c in plan.columns]], plan)


def in_memory(table, plan, out: Path, **kwargs) -> tuple[Path, FillReport]:
    frame, report = fill_table(table, plan, fit_on=kwargs.pop("fit_on", table),
                               text_output=out.suffix == ".csv", **kwargs)
    write_table(frame, out, delimiter=table.delimiter if out.suffix == ".csv" else ",")
    return out, report


@pytest.fixture(scope="module")
def trips(tmp_path_factory):
    path = write_trip_log(tmp_path_factory.mktemp("trips") / "trips.csv", n_trips=ROWS)
    table, plan = scored(path)
    assert plan.columns["payload_kg"].cleaning["tokens"].get("not weighed")  # disguised
    assert plan.columns["driver_rating"].cleaning["missing_codes"] == ["99"]  # a code
    assert plan.columns["departed_at"].kind == "datetime"
    return path, table, plan, fitted_on(table, plan)


@pytest.fixture(scope="module")
def comma_trips(tmp_path_factory):
    # A decimal-comma export: ";" between cells, "," before decimals.
    frame = make_trip_log(ROWS, seed=5)
    for name in ("distance_km", "setpoint_c", "ambient_c", "door_open_min", "fuel_l"):
        frame[name] = frame[name].str.replace(".", ",", regex=False)
    path = tmp_path_factory.mktemp("comma") / "trips.csv"
    frame.to_csv(path, index=False, sep=";")
    table = read_table(path)
    assert (table.delimiter, table.decimal) == (";", ",")
    # Statistics are cheap to score; two columns then get a model by a user's edit.
    plan, _, _ = score_table(table, replace(CHEAP, methods=["mean", "median", "mode"]))
    for name in ("ambient_c", "fuel_l"):
        plan.columns[name].method, plan.columns[name].params = "chained-linear", {}
    plan.columns["ambient_c"].indicator = True
    return path, table, plan, fitted_on(table, plan)


# ---------------------------------------------------------------- identity with in-memory


@pytest.mark.parametrize("chunk_rows", [300, 1999, 10**6])
def test_streamed_csv_is_the_in_memory_fill_byte_for_byte(trips, tmp_path, chunk_rows):
    path, table, plan, fitted = trips
    expected, memory = in_memory(table, plan, tmp_path / "memory.csv")
    report = stream_fill(path, tmp_path / "streamed.csv", fitted, plan, chunk_rows=chunk_rows)
    assert (tmp_path / "streamed.csv").read_bytes() == expected.read_bytes()
    assert report.filled == memory.filled and sum(report.filled.values()) > 0
    assert report.methods == memory.methods
    assert (report.dropped, report.excluded) == (memory.dropped, memory.excluded)
    header = expected.read_text(encoding="utf-8").splitlines()[0].split(",")
    flags = [h for h in header if h.endswith("__was_missing")]
    assert {"depot__was_missing", "ambient_c__was_missing"} <= set(flags)
    assert header[-len(flags):] == flags  # after all the table's columns


def test_fit_sample_of_a_file_smaller_than_the_sample_is_the_plain_in_memory_fill(
        trips, tmp_path):
    # What fill does on a file that fits: no --fit-on, the plan's own file, fitted whole.
    path, table, plan, _ = trips
    frame, memory = fill_table(table, plan)
    expected = write_table(frame, tmp_path / "memory.csv", delimiter=table.delimiter)
    fitted, report = fit_sample(path, plan, n=ROWS)
    assert report.warnings == []  # the sample's fingerprint is the file's
    report = stream_fill(path, tmp_path / "streamed.csv", fitted, plan, chunk_rows=700,
                         report=report)
    assert (tmp_path / "streamed.csv").read_bytes() == expected.read_bytes()
    assert report.filled == memory.filled


def test_decimal_comma_files_stream_to_the_same_bytes(comma_trips, tmp_path):
    path, table, plan, fitted = comma_trips
    expected, _ = in_memory(table, plan, tmp_path / "memory.csv")
    stream_fill(path, tmp_path / "streamed.csv", fitted, plan, chunk_rows=300)
    written = (tmp_path / "streamed.csv").read_bytes()
    assert written == expected.read_bytes()
    assert re.search(rb";-?\d+,\d;", written)  # decimal commas written back


def test_parquet_output_of_a_csv_has_the_in_memory_values_and_schema(trips, tmp_path):
    path, table, plan, fitted = trips
    expected, _ = in_memory(table, plan, tmp_path / "memory.parquet")
    stream_fill(path, tmp_path / "streamed.parquet", fitted, plan, chunk_rows=300)
    want, got = pq.read_table(expected), pq.read_table(tmp_path / "streamed.parquet")
    assert got.schema.equals(want.schema, check_metadata=True)
    assert got.equals(want)
    assert pq.ParquetFile(tmp_path / "streamed.parquet").num_row_groups == math.ceil(ROWS / 300)


@pytest.fixture(scope="module")
def parquet_trips(tmp_path_factory, trips):
    # A typed Parquet file: labels as dictionary columns, integers with holes, timestamps,
    # written in several row groups.
    _, csv_table, csv_plan, _ = trips
    typed, _ = clean_with_plan(csv_table, csv_plan)
    typed["depot"] = typed["depot"].astype("category")
    path = tmp_path_factory.mktemp("pq") / "trips.parquet"
    pq.write_table(pa.Table.from_pandas(typed, preserve_index=False), path, row_group_size=450)
    table = read_table(path)
    assert isinstance(table.frame["depot"].dtype, pd.CategoricalDtype)
    # Statistics are cheap to score; two columns then get a model by a user's edit.
    plan, _, _ = score_table(table, replace(CHEAP, methods=["mean", "median", "mode"]))
    for name in ("depot", "fuel_l"):
        plan.columns[name].method, plan.columns[name].params = "chained-linear", {}
    return path, table, plan, fitted_on(table, plan)


def test_parquet_input_streams_to_the_in_memory_values_and_schema(parquet_trips, tmp_path):
    path, table, plan, fitted = parquet_trips
    expected, memory = in_memory(table, plan, tmp_path / "memory.parquet")
    report = stream_fill(path, tmp_path / "streamed.parquet", fitted, plan, chunk_rows=300)
    want, got = pq.read_table(expected), pq.read_table(tmp_path / "streamed.parquet")
    assert got.schema.equals(want.schema, check_metadata=True)
    assert got.equals(want)
    assert report.filled == memory.filled


def test_parquet_with_timestamps_is_not_streamed_to_csv(parquet_trips, tmp_path):
    path, _, plan, fitted = parquet_trips
    with pytest.raises(OptionError, match=r"timestamp columns \(departed_at, arrived_at"):
        stream_fill(path, tmp_path / "out.csv", fitted, plan)
    assert not (tmp_path / "out.csv").exists()


def test_parquet_without_timestamps_streams_to_the_in_memory_csv(tmp_path):
    rng = np.random.default_rng(3)
    n = 500
    frame = pd.DataFrame({
        "load_kg": np.where(rng.random(n) < 0.2, np.nan, rng.normal(900, 50, n).round(1)),
        "stops": pd.array(np.where(rng.random(n) < 0.2, None, rng.integers(0, 6, n)),
                          dtype="Int64"),
        "depot": pd.Series(rng.choice(["Hull", "Leeds, East", None], n), dtype="str"),
    })
    path = tmp_path / "loads.parquet"
    pq.write_table(pa.Table.from_pandas(frame), path, row_group_size=128)
    columns = {
        "load_kg": ("numeric", "mean", ColumnSpec(kind="numeric", decimals=1)),
        "stops": ("numeric", "median", ColumnSpec(kind="numeric", integer=True)),
        "depot": ("categorical", "mode", ColumnSpec(kind="categorical")),
    }
    plan = Plan(source={}, settings={"seed": 0}, columns={
        name: ColumnPlan(kind=kind, missing_fraction=0.2, action="impute", method=method,
                         cleaning=spec.to_dict(), indicator=name == "stops")
        for name, (kind, method, spec) in columns.items()})
    table = read_table(path)
    expected, _ = in_memory(table, plan, tmp_path / "memory.csv")
    stream_fill(path, tmp_path / "streamed.csv", fitted_on(table, plan), plan, chunk_rows=90)
    assert (tmp_path / "streamed.csv").read_bytes() == expected.read_bytes()


def test_a_later_file_with_new_tokens_streams_like_fill_on_with_fit_on(trips, tmp_path):
    # --fit-on: the methods learn from the planned file and fill another one.
    _, table, plan, fitted = trips
    later = make_trip_log(900, seed=11)
    later.loc[[5, 400, 401], "payload_kg"] = ["scale broken", "scale broken", "n.k."]
    later_path = tmp_path / "later.csv"
    later.to_csv(later_path, index=False)
    expected, memory = in_memory(read_table(later_path), plan, tmp_path / "memory.csv",
                                 fit_on=table)
    report = stream_fill(later_path, tmp_path / "streamed.csv", fitted, plan, chunk_rows=256)
    assert (tmp_path / "streamed.csv").read_bytes() == expected.read_bytes()
    assert report.new_tokens == memory.new_tokens == {
        "payload_kg": {"scale broken": 2, "n.k.": 1}}
    assert "column 'payload_kg': new cells read as missing: 'scale broken' (2), 'n.k.' (1)" \
        in report.warnings


def test_two_worker_processes_write_the_same_bytes(trips, tmp_path):
    path, _, plan, fitted = trips
    stream_fill(path, tmp_path / "one.csv", fitted, plan, chunk_rows=500)
    report = stream_fill(path, tmp_path / "two.csv", fitted, plan, chunk_rows=500, n_jobs=2)
    assert (tmp_path / "two.csv").read_bytes() == (tmp_path / "one.csv").read_bytes()
    assert sum(report.filled.values()) > 0


def test_progress_counts_bytes_up_to_the_file_size(trips, tmp_path):
    path, _, plan, fitted = trips
    calls = []
    stream_fill(path, tmp_path / "out.csv", fitted, plan, chunk_rows=500,
                progress=lambda done, total: calls.append((done, total)))
    size = path.stat().st_size
    assert len(calls) == 4 and all(total == size for _, total in calls)
    done = [d for d, _ in calls]
    assert done == sorted(done) and done[-1] == size


# ----------------------------------------------------------------------- reading chunks


def chunk_frames(path: Path, rows: int) -> pd.DataFrame:
    source = chunks._open(path, "FILE")
    parts, offset = [], 0
    for table in source.tables(rows):
        parts.append(source.framer.frame(table, offset))
        offset += table.num_rows
    return pd.concat(parts), source


AWKWARD = st.text(alphabet=st.sampled_from(list('ab ,;"\n\t\u00e9\u2028x')),
                  max_size=6)


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cells=st.lists(st.tuples(AWKWARD, AWKWARD, AWKWARD), min_size=1, max_size=12),
       delimiter=st.sampled_from([",", ";"]), rows=st.integers(1, 5))
def test_chunks_are_read_as_read_table_reads_the_file(tmp_path, cells, delimiter, rows):
    frame = pd.DataFrame(cells, columns=["a", "b b", 'c"'])
    path = tmp_path / "cells.csv"
    frame.to_csv(path, index=False, sep=delimiter, lineterminator="\n")
    try:
        expected = read_table(path)
    except TableIOError:  # e.g. every row blank: a header but no rows
        # Both readers refuse it, naming the file; the parser's own words may differ.
        with pytest.raises(TableIOError, match=re.escape(f"FILE '{path}'")):
            chunk_frames(path, rows)
        return
    got, source = chunk_frames(path, rows)
    pd.testing.assert_frame_equal(got, expected.frame)
    assert (source.delimiter, source.decimal) == (expected.delimiter, expected.decimal)


@settings(max_examples=60, deadline=None)
@given(cells=st.lists(st.tuples(AWKWARD, AWKWARD), min_size=1, max_size=12),
       delimiter=st.sampled_from([",", ";", "\t"]), one=st.booleans())
def test_csv_rows_are_written_as_pandas_to_csv_writes_them(cells, delimiter, one):
    # Reference: pandas DataFrame.to_csv, which write_table calls.
    frame = pd.DataFrame(cells, columns=["a", "b"], dtype="str")
    if one:
        frame = frame[["a"]]
    expected = frame.to_csv(None, index=False, header=False, sep=delimiter, lineterminator="\n")
    columns = [pa.array(frame[c], type=pa.string()) for c in frame.columns]
    assert writing._csv_body(columns, delimiter).to_pybytes() == expected.encode("utf-8")


@pytest.mark.parametrize("data", [
    b"\xef\xbb\xbf a ,b\r\n1,x\r\n,\r\n3,\"q\r\nz\"\r\n",  # BOM, CRLF, spaces in the header
    b"a\n1\n\n2\n \n\n\n",  # one column: blank lines are rows, except at the end
    b"a,b\n1,2\n  \t\n3,4\n\n",  # a line of blanks is skipped, as pandas skips it
    b"\"x,\ny\",b\n1,2\n",  # a quoted header with a line break
    b"a,b\n1,2",  # no final line break
], ids=["bom-crlf", "one-column", "blank-line", "quoted-header", "no-eol"])
def test_awkward_files_are_read_as_read_table_reads_them(tmp_path, data):
    path = tmp_path / "odd.csv"
    path.write_bytes(data)
    got, _ = chunk_frames(path, 1)
    pd.testing.assert_frame_equal(got, read_table(path).frame)


def test_quoted_line_breaks_across_read_blocks_and_chunks(trips, tmp_path, monkeypatch):
    # Cells with line breaks in them, read in tiny blocks: rows span block boundaries. The
    # trip ids are passed through, so they are written back, line breaks and all.
    _, table, plan, fitted = trips
    frame = table.frame.copy()
    rows = np.arange(0, ROWS, 7)
    frame.loc[rows, "trip_id"] = [f"trip {i},\nsecond \"line\"" for i in rows]
    frame.loc[rows + 1, "remark"] = [f"line one\r\nline two {i}" for i in rows]
    path = tmp_path / "remarks.csv"
    frame.to_csv(path, index=False)
    monkeypatch.setattr(chunks, "_BLOCK_BYTES", 512)
    got, _ = chunk_frames(path, 333)
    other = read_table(path)
    pd.testing.assert_frame_equal(got, other.frame)
    expected, _ = in_memory(other, plan, tmp_path / "memory.csv", force=True)
    assert expected.read_bytes().count(b'\nsecond ""line""') == len(rows)
    stream_fill(path, tmp_path / "streamed.csv", fitted, plan, chunk_rows=333)
    assert (tmp_path / "streamed.csv").read_bytes() == expected.read_bytes()


@pytest.mark.parametrize("pad", range(500, 512))
def test_a_quoted_crlf_split_by_a_read_block_keeps_its_line_feed(tmp_path, monkeypatch, pad):
    # pyarrow 26 drops the "\n" of a quoted "\r\n" that a block boundary splits (one of
    # these pads puts the "\r" last in a 512-byte block); the reader works around it.
    path = tmp_path / "crlf.csv"
    path.write_bytes(b"a,b\n" + b"x" * pad + b',"p\r\nq"\n1,2\n')
    monkeypatch.setattr(chunks, "_BLOCK_BYTES", 512)
    got, _ = chunk_frames(path, 1)
    assert got["b"].tolist() == ["p\r\nq", "2"]
    pd.testing.assert_frame_equal(got, read_table(path).frame)


# ----------------------------------------------------------------------------- failures


def test_a_bad_row_late_in_the_file_fails_and_leaves_no_output(trips, tmp_path):
    path, _, plan, fitted = trips
    bad = tmp_path / "bad.csv"
    bad.write_bytes(path.read_bytes() + b"a,b\n")
    with pytest.raises(TableIOError, match=r"bad\.csv' is not a well-formed CSV file: .*"
                                           r"Expected 15 columns, got 2"):
        stream_fill(bad, tmp_path / "out.csv", fitted, plan, chunk_rows=300)
    assert list(tmp_path.iterdir()) == [bad]  # no output, no temporary file


def test_invalid_utf8_late_in_the_file_is_a_table_error(trips, tmp_path):
    path, _, plan, fitted = trips
    bad = tmp_path / "bad.csv"
    data = path.read_bytes()
    bad.write_bytes(data[:-40] + b"\xff" + data[-39:])
    with pytest.raises(TableIOError, match=r"bad\.csv' is not valid UTF-8"):
        stream_fill(bad, tmp_path / "out.csv", fitted, plan)


def test_a_file_without_a_column_the_fitted_plan_uses_is_a_data_error(trips, tmp_path):
    _, table, plan, fitted = trips
    narrow = tmp_path / "narrow.csv"
    table.frame.drop(columns=["fuel_l"]).to_csv(narrow, index=False)
    with pytest.raises(DataError, match=r"narrow\.csv' lacks columns the fitted plan uses: "
                                        r"fuel_l"):
        stream_fill(narrow, tmp_path / "out.csv", fitted, plan)


@pytest.mark.parametrize("data, message", [
    ("", "is empty"),
    ("  \n\n", "is empty"),
    ("{header}\n", "has a header but no rows"),
    ("{header}\r\n\n\n", "has a header but no rows"),
])
def test_empty_files_are_refused_as_read_table_refuses_them(trips, tmp_path, data, message):
    _, table, plan, fitted = trips
    path = tmp_path / "empty.csv"
    path.write_text(data.format(header=",".join(table.frame.columns)), encoding="utf-8")
    with pytest.raises(TableIOError, match=message):
        read_table(path)
    with pytest.raises(TableIOError, match=message):
        reservoir_sample(path, 10, seed=0)
    with pytest.raises(TableIOError, match=message):
        stream_fill(path, tmp_path / "out.csv", fitted, plan)


def test_bad_sizes_are_option_errors(trips, tmp_path):
    path, _, plan, fitted = trips
    with pytest.raises(OptionError, match="`chunk_rows` must be a whole number of at least "
                                          "1, got 0"):
        stream_fill(path, tmp_path / "out.csv", fitted, plan, chunk_rows=0)
    with pytest.raises(OptionError, match="`fit_sample` must be a whole number"):
        reservoir_sample(path, 2.5, seed=0)
    with pytest.raises(OptionError, match="`seed` must be a whole number of at least 0, got -1"):
        reservoir_sample(path, 5, seed=-1)
    with pytest.raises(OptionError, match="`n_jobs` must be a whole number of at least 1"):
        stream_fill(path, tmp_path / "out.csv", fitted, plan, n_jobs=True)


# ---------------------------------------------------------------------- reservoir sample


def numbered(path: Path, n: int) -> Path:
    path.write_text("row\n" + "".join(f"{i}\n" for i in range(n)), encoding="utf-8")
    return path


def textbook_algorithm_r(n_rows: int, n: int, seed: int) -> list[int]:
    # Algorithm R as Vitter (1985, ACM TOMS 11(1):37-57, section 2) states it, one row at a
    # time: row t >= n replaces slot floor(u * (t + 1)) when that slot is below n.
    rng = np.random.default_rng(seed)
    reservoir = list(range(min(n, n_rows)))
    for t in range(n, n_rows):
        j = math.floor(rng.random() * (t + 1))
        if j < n:
            reservoir[j] = t
    return sorted(reservoir)


@pytest.mark.parametrize("n_rows, n", [(5000, 37), (5000, 3000), (70_000, 2500)])
def test_reservoir_sample_is_algorithm_r_row_by_row(tmp_path, n_rows, n):
    path = numbered(tmp_path / "rows.csv", n_rows)
    sample = reservoir_sample(path, n, seed=12)
    positions = sample.frame.index.tolist()
    assert positions == textbook_algorithm_r(n_rows, n, seed=12)
    assert len(positions) == n and len(set(positions)) == n
    assert sample.frame["row"].tolist() == [str(p) for p in positions]  # rows travel intact


def test_reservoir_sample_is_uniform_over_the_file(tmp_path):
    # Every row is kept with probability n / N (Vitter 1985). Over 120 samples, the kept
    # positions fall evenly in 20 bins of the file; reference test: scipy.stats.chisquare.
    n_rows, n, bins = 2000, 100, 20
    path = numbered(tmp_path / "rows.csv", n_rows)
    counts = np.zeros(bins)
    for seed in range(120):
        positions = reservoir_sample(path, n, seed=seed).frame.index.to_numpy()
        counts += np.bincount(positions * bins // n_rows, minlength=bins)
    assert counts.sum() == 120 * n
    assert chisquare(counts).pvalue > 1e-3  # common practice, no source: the test's level
    # the first n rows (the first bin) are not favoured: a classic reservoir bug
    assert counts[0] < 1.2 * counts.mean()


def test_reservoir_sample_is_deterministic_given_the_seed(trips):
    path = trips[0]
    first = reservoir_sample(path, 250, seed=3).frame
    pd.testing.assert_frame_equal(reservoir_sample(path, 250, seed=3).frame, first)
    assert not reservoir_sample(path, 250, seed=4).frame.index.equals(first.index)


def test_a_file_smaller_than_the_sample_is_returned_whole_as_read_table_reads_it(
        comma_trips):
    path, table, _, _ = comma_trips
    sample = reservoir_sample(path, ROWS + 1, seed=0)
    pd.testing.assert_frame_equal(sample.frame, table.frame)
    assert (sample.delimiter, sample.decimal, sample.format) == (";", ",", "csv")
    assert sample.fingerprint == table.fingerprint  # of the whole file, bytes hashed once


def test_a_parquet_sample_keeps_the_file_types_and_labels(parquet_trips):
    path, table, _, _ = parquet_trips
    sample = reservoir_sample(path, 300, seed=1)
    assert len(sample.frame) == 300 and sample.frame.index.is_monotonic_increasing
    expected = table.frame.iloc[sample.frame.index.to_numpy()]
    pd.testing.assert_frame_equal(sample.frame, expected, check_index_type=False)
    assert sample.fingerprint == table.fingerprint
