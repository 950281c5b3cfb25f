"""Fills of files larger than memory: one pass to sample rows for fitting, one pass to fill.

Every chunk (:mod:`imputelab.fill.chunks`: exactly the frame
:func:`~imputelab.io.tables.read_table` would give for those rows) goes through the plan's
cleaning, the fitted methods, the missing indicators and (CSV) the text rendering of the
in-memory fill, and is appended to the output (:mod:`imputelab.fill.writing`); memory stays
flat in the file's size. The output is the same, byte for byte for CSV and value for value
(same schema) for Parquet, as the in-memory fill with methods fitted on the same rows.

Fitting needs the rows in memory, so a large file is fitted on a uniform sample of its rows,
drawn in the same single pass that computes its fingerprint (:mod:`imputelab.fill.sample`).

Examples
--------
>>> import tempfile, pathlib
>>> from imputelab.score.plan import ColumnPlan, Plan
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> _ = (folder / "t.csv").write_text("a,b\\n1,x\\n,y\\n3,x\\n")
>>> plan = Plan(source={}, settings={}, columns={
...     "a": ColumnPlan(kind="numeric", missing_fraction=1 / 3, action="impute",
...                     method="mean", cleaning={"kind": "numeric", "integer": True}),
...     "b": ColumnPlan(kind="binary", missing_fraction=0.0, action="exclude")})
>>> fitted, report = fit_sample(folder / "t.csv", plan, force=True)
>>> report = stream_fill(folder / "t.csv", folder / "out.csv", fitted, plan, report=report)
>>> (folder / "out.csv").read_text()
'a,b\\n1,x\\n2,y\\n3,x\\n'
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
from joblib import Parallel, delayed

from imputelab.checks import check_count
from imputelab.errors import DataError, OptionError, param
from imputelab.fill.chunks import Progress, _CsvChunks, _Framer, _no_rows, _open, _ParquetChunks
from imputelab.fill.frame import (
    FillReport,
    FittedFill,
    _specs,
    check_plan,
    clean_with_plan,
    finish_output,
    missing_indicators,
)
from imputelab.fill.sample import DEFAULT_FIT_SAMPLE, fit_sample, reservoir_sample
from imputelab.fill.text import _format
from imputelab.fill.writing import _csv_body, _CsvOut, _ParquetOut
from imputelab.io.columns import new_token_warnings, ordered_tokens
from imputelab.io.tables import Table, atomic_path, table_format
from imputelab.score.plan import Plan

__all__ = [
    "DEFAULT_CHUNK_ROWS",
    "DEFAULT_FIT_SAMPLE",
    "check_new_file",
    "fill_chunk",
    "fit_sample",
    "reservoir_sample",
    "stream_fill",
]

DEFAULT_CHUNK_ROWS = 64_000


@dataclass
class _Job:
    """What filling one chunk needs (plain data: a worker process gets it with each chunk)."""

    fitted: FittedFill
    plan: Plan
    framer: _Framer
    path: Path
    delimiter: str
    decimal: str
    out_format: str
    specs: dict[str, Any]

    @property
    def text_output(self) -> bool:
        return self.framer.format == "csv" and self.out_format == "csv"


def _format_cells(values: np.ndarray, spec: Any, decimal: str) -> np.ndarray:
    """``fill._format`` of every value, computed once per distinct value.

    Filled cells repeat (a mean fill is one value; model fills are rounded to the column's
    decimals), and the text of each is the same function of the value as in render_text.
    Numbers are told apart by their bits, so -0.0 and 0.0 keep their own text.
    """
    keys = values.view(f"i{values.itemsize}") if values.dtype.kind in "fmM" else values
    codes, uniques = pd.factorize(keys)
    first = np.empty(len(uniques), dtype=np.int64)
    first[codes[::-1]] = np.arange(len(codes) - 1, -1, -1)
    texts = np.asarray([_format(values[i], spec, decimal) for i in first], dtype=object)
    return texts[codes]


def _text_columns(job: _Job, table: pa.Table, typed: pd.DataFrame, filled: pd.DataFrame,
                  flags: pd.DataFrame) -> list[pa.Array]:
    """render_text's output as Arrow columns: the file's own text, filled cells rewritten,
    then the indicators as "0"/"1"."""
    specs = job.specs
    position = {name: i for i, name in enumerate(job.framer.columns)}
    out = []
    for name in filled.columns:
        raw = table.column(position[name]).combine_chunks()
        if name in specs and name in typed.columns:
            holes = typed[name].isna().to_numpy() & filled[name].notna().to_numpy()
            if holes.any():
                text = _format_cells(filled[name].to_numpy()[holes], specs[name], job.decimal)
                raw = pc.replace_with_mask(raw, pa.array(holes),
                                           pa.array(text, type=raw.type))
        out.append(raw)
    for name in flags.columns:
        out.append(pc.if_else(pa.array(flags[name].to_numpy() == 1), "1", "0"))
    return out


def _apply_to_holes(fitted: FittedFill, typed: pd.DataFrame, report: FillReport
                    ) -> pd.DataFrame:
    """``fitted.apply(typed)``, running the methods on the rows that have a hole only.

    A fitted fill is row-wise (each row's fill depends on that row alone), so the rows
    without a hole in an imputed column come out as they went in; often a third of a
    file's rows or more, which the methods then need not see.
    """
    targets = [n for n in fitted.targets if n in typed.columns]
    rows = typed[targets].isna().to_numpy().any(axis=1)
    if rows.all():
        return fitted.apply(typed, report)
    # One row at least, so that the report names the methods and dropped columns.
    part = fitted.apply(typed[rows] if rows.any() else typed.iloc[:1], report)
    out = typed[list(part.columns)].copy()
    where = np.flatnonzero(rows)
    for name in targets:
        if name in part.columns and len(where):
            column = out[name].copy()
            column.iloc[where] = part[name].array
            out[name] = column
    return out


def fill_chunk(job: _Job, chunk: Table
               ) -> tuple[pd.DataFrame, pd.DataFrame, FillReport, dict[str, dict[str, int]]]:
    """A chunk cleaned by the plan, its planned columns filled, its report and new tokens."""
    typed, tokens = clean_with_plan(chunk, job.plan)
    planned = [c for c in typed.columns if c in job.plan.columns]
    part = FillReport()
    return typed, _apply_to_holes(job.fitted, typed[planned], part), part, tokens


def _run_chunk(job: _Job, table: pa.Table, offset: int
               ) -> tuple[list[str], Any, FillReport, dict[str, dict[str, int]]]:
    """One chunk through the steps of fill_table with fit_on: clean, fill, indicators, then
    its output (CSV bytes or an Arrow table)."""
    chunk = Table(job.framer.frame(table, offset), job.path, job.framer.format,
                  job.delimiter, job.decimal)
    plan = job.plan
    typed, filled, part, tokens = fill_chunk(job, chunk)
    if not job.text_output:
        frame = finish_output(chunk, plan, typed, filled, text_output=False)
        columns = [str(c) for c in frame.columns]
        if job.out_format == "csv":
            _check_csv_writable(frame)
            return columns, frame.to_csv(None, index=False, header=False, sep=job.delimiter,
                                         lineterminator="\n").encode("utf-8"), part, tokens
        return columns, pa.Table.from_pandas(frame, preserve_index=False), part, tokens
    # finish_output's steps, with the cells' text kept in Arrow: render_text formats every
    # filled cell and assigns into pandas columns, the slowest step of the writing
    for name in typed.columns:  # unplanned columns pass through in place
        if name not in plan.columns:
            filled[name] = typed[name]
    filled = filled[[c for c in typed.columns if c in filled.columns]]
    flags = missing_indicators(typed, plan, filled.columns)
    columns = [*map(str, filled.columns), *map(str, flags.columns)]
    data = _csv_body(_text_columns(job, table, typed, filled, flags), job.delimiter)
    return columns, data, part, tokens


def _check_csv_writable(frame: pd.DataFrame) -> None:
    stamps = [str(c) for c in frame.columns
              if pd.api.types.is_datetime64_any_dtype(frame[c].dtype)
              or pd.api.types.is_timedelta64_dtype(frame[c].dtype)]
    if stamps:
        raise OptionError(
            f"{param('out')}: a Parquet file with timestamp columns ({', '.join(stamps)}) is "
            "streamed to Parquet only (pandas writes a timestamp column as text from all its "
            f"values at once); give {param('out')} a .parquet name, or fill it in memory")


def _worker_chunk(job: _Job, table: pa.Table, offset: int) -> tuple[Any, ...]:
    """:func:`_run_chunk` in a worker process (its output as picklable bytes)."""
    columns, data, part, tokens = _run_chunk(job, table, offset)
    if isinstance(data, pa.Buffer):
        data = data.to_pybytes()
    return columns, data, part, tokens


def _results(source: _CsvChunks | _ParquetChunks, make_job: Callable[[], _Job],
             chunk_rows: int, n_jobs: int) -> Iterator[tuple[Any, ...]]:
    """Each chunk's fill, in file order, in this process or in ``n_jobs`` worker processes.

    Workers are joblib's (loky): unlike multiprocessing's spawned processes they do not
    re-run the caller's main module, and chunks are read only as fast as workers take them
    (``pre_dispatch``), so memory stays bounded.
    """
    tables = source.tables(chunk_rows)
    first = next(tables, None)
    if first is None:
        return
    job = make_job()  # the decimal mark is known once the first chunk is read
    chunks = _with_offsets(itertools.chain([first], tables))
    if n_jobs == 1:
        for table, offset in chunks:
            yield _run_chunk(job, table, offset)
        return
    parallel = Parallel(n_jobs=n_jobs, return_as="generator", pre_dispatch="n_jobs + 1")
    yield from parallel(delayed(_worker_chunk)(job, table, offset) for table, offset in chunks)


def _with_offsets(tables: Iterator[pa.Table]) -> Iterator[tuple[pa.Table, int]]:
    offset = 0
    for table in tables:
        yield table, offset
        offset += table.num_rows


# -------------------------------------------------------------------------------- the fill


def stream_fill(
    path: str | os.PathLike[str],
    out_path: str | os.PathLike[str],
    fitted: FittedFill,
    plan: Plan,
    *,
    chunk_rows: int = DEFAULT_CHUNK_ROWS,
    progress: Progress | None = None,
    report: FillReport | None = None,
    n_jobs: int = 1,
    option: str = "FILE",
) -> FillReport:
    """Fill a file chunk by chunk with fitted methods and write the result, atomically.

    Each chunk is read as :func:`~imputelab.io.tables.read_table` reads the file, cleaned by the
    plan, filled by ``fitted`` (no refitting), given the plan's missing indicators and, for
    CSV to CSV, written with every observed cell's original text. The output equals what
    ``fill_table(read_table(path), plan, fit_on=...)`` and ``write_table`` give when
    ``fitted`` was fitted on the same rows: the same bytes for CSV, the same values and
    schema for Parquet, whatever ``chunk_rows`` and ``n_jobs``.

    Parameters
    ----------
    path : path-like
        CSV or Parquet file to fill.
    out_path : path-like
        Output ``.csv`` or ``.parquet``. CSV output from CSV input keeps the input's
        delimiter; from Parquet input it is comma-separated.
    fitted : FittedFill
        Methods fitted by :func:`fit_sample` or :func:`~imputelab.fill.frame.fit_plan`.
    plan : Plan
        The plan ``fitted`` was made from (its cleaning and indicators apply).
    chunk_rows : int
        Rows per chunk; memory grows with it (and ``n_jobs``), not with the file.
    progress : callable, optional
        ``progress(done, total)`` after each chunk: bytes (CSV input) or rows (Parquet).
    report : FillReport, optional
        Report to continue (e.g. the one :func:`fit_sample` returns).
    n_jobs : int
        Worker processes filling chunks side by side (1: in this process).
    option : str
        How the input file is named in error messages.

    Returns
    -------
    FillReport
        Cells filled per column over the whole file, new tokens and warnings.

    Raises
    ------
    TableIOError
        Unreadable or malformed input (as read_table); a row with too few or too many fields.
    DataError
        The file lacks columns the fitted methods use.
    OptionError
        A bad ``chunk_rows`` or ``n_jobs``; a Parquet file with timestamp columns written as
        CSV (pandas formats a timestamp column from all its values at once).
    """
    check_count(chunk_rows, "chunk_rows")
    check_count(n_jobs, "n_jobs")
    out_path = Path(out_path)
    out_format = table_format(out_path, option=param("out"))
    totals = _Totals(report if report is not None else FillReport())
    source = _open(path, option)
    check_new_file(source.framer.columns, source.path, fitted, plan, totals.report, option)

    def make_job() -> _Job:
        return _Job(fitted, plan, source.framer, source.path, source.delimiter,
                    source.decimal, out_format, _specs(plan))

    with atomic_path(out_path) as tmp:
        writer = _CsvOut(tmp, source.delimiter) if out_format == "csv" else _ParquetOut(tmp)
        try:
            _write_chunks(_results(source, make_job, chunk_rows, n_jobs), writer, totals,
                          source, progress)
        finally:
            writer.close()
    return totals.close()


def _write_chunks(results: Iterator[tuple[Any, ...]], writer: _CsvOut | _ParquetOut,
                  totals: _Totals, source: _CsvChunks | _ParquetChunks,
                  progress: Progress | None) -> None:
    """Write each chunk's fill as it comes, in file order, and add up the chunks' reports."""
    for names, data, part, tokens in results:
        writer.write(names, data)
        totals.add(part, tokens)
        if progress is not None:
            progress(min(source.done, source.total), source.total)
    if totals.chunks == 0:
        raise _no_rows(source)
    if progress is not None and source.done < source.total:
        progress(source.total, source.total)


def check_new_file(columns: list[str], path: Path, fitted: FittedFill, plan: Plan,
                   report: FillReport, option: str) -> None:
    """Check the columns of a file to fill with fitted methods; warnings go to ``report``.

    The file is new by design (the methods were fitted elsewhere or on a sample), so only
    its columns are checked, as :func:`~imputelab.fill.frame.fill_table` checks the file
    beside ``fit_on``.

    Raises
    ------
    DataError
        The file lacks columns the fitted methods use.
    """
    needed = [c for c in fitted.encoding.kinds if c not in columns]
    if needed:
        raise DataError(f"{option} '{path}' lacks columns the fitted plan uses: "
                        f"{', '.join(needed)}")
    shape = Table(pd.DataFrame(columns=columns), path, "parquet")
    report.warnings.extend(check_plan(plan, shape, force=True, content=False))


class _Totals:
    """The chunks' reports added up in file order: cells filled, new tokens, methods."""

    def __init__(self, report: FillReport):
        self.report = report
        self.chunks = 0
        self.tokens: dict[str, dict[str, int]] = {}

    def add(self, part: FillReport, tokens: dict[str, dict[str, int]]) -> None:
        """Add one chunk's report and new tokens."""
        report = self.report
        self.chunks += 1
        for name, count in part.filled.items():
            report.filled[name] = report.filled.get(name, 0) + count
        for name, found in tokens.items():
            merged = self.tokens.setdefault(name, {})
            for token, count in found.items():
                merged[token] = merged.get(token, 0) + count
        report.methods.update(part.methods)
        report.dropped, report.excluded = list(part.dropped), list(part.excluded)

    def close(self) -> FillReport:
        """The report, with the new tokens (most frequent first) and their warnings."""
        for name, found in self.tokens.items():
            self.report.new_tokens[name] = ordered_tokens(found)
        self.report.warnings.extend(new_token_warnings(self.report.new_tokens))
        return self.report
