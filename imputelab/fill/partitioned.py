"""Fills on a Dask cluster: the workers read partitions of a file or folder and fill them.

The input is a CSV file, a Parquet file, or a folder of Parquet files (read in name order,
as one table: the rows of the first file, then the second's...). ``dask.dataframe`` reads it
in partitions (:func:`dask.dataframe.from_map`): a Parquet row group each, or a byte range
of a CSV file cut at a row's end. Every partition is exactly the frame
:func:`imputelab.io.tables.read_table` would give for those rows, so the fill applied to it with
``map_partitions`` (clean by the plan, fill with the fitted methods, add the indicators: the
steps of :func:`imputelab.fill.streamed.stream_fill`) gives the values of the single-machine
fill. The output is a folder of Parquet files, one a partition (``part-00000.parquet``, ...;
read back in name order they are the table), written into a temporary folder beside ``out_dir``
and renamed into place when every partition is done.

The fitted methods are shipped to the workers once (scattered), by Dask's own serialization:
they are objects this process built (fitted here, or loaded by
:func:`imputelab.fill.saved.load_model`, which reads no pickle). Every worker must see the input
and the output folder at the same path (one machine, or a shared file system).

A CSV file is cut between rows by counting quotes: a line break ends a row when an even
number of ``"`` precede it. That holds for files whose quotes enclose whole cells (as every
CSV writer quotes); a file with a stray quote inside an unquoted cell is refused, with the
advice to fill it on one machine (``stream_fill``).
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from imputelab.errors import DataError, OptionError, TableIOError, param
from imputelab.executors.pool import worker_result
from imputelab.fill.chunks import _CsvChunks, _Framer, _ParquetChunks, csv_options
from imputelab.fill.frame import FillReport, FittedFill, _specs, finish_output
from imputelab.fill.streamed import _Job, _Totals, check_new_file, fill_chunk
from imputelab.io.tables import Table, _short_reason, atomic_dir
from imputelab.score.plan import Plan

__all__ = ["DEFAULT_PARTITION_BYTES", "cluster_fill", "partitions"]

#: Bytes of CSV per partition.
DEFAULT_PARTITION_BYTES = 64 * 2**20
_QUOTE, _LF, _CR = ord('"'), ord("\n"), ord("\r")

Progress = Callable[[int, int], None]


@dataclass(frozen=True)
class _Piece:
    """One partition: a Parquet file's row group, or bytes ``[start, stop)`` of a CSV file."""

    path: Path
    framer: _Framer
    row_group: int = 0
    start: int = 0
    stop: int = 0
    delimiter: str = ","


def _read_piece(piece: _Piece) -> pd.DataFrame:
    """The rows of a piece, as read_table reads them."""
    if piece.framer.format == "parquet":
        with pq.ParquetFile(piece.path) as handle:
            table = handle.read_row_group(piece.row_group)
        return piece.framer.frame(table, 0)
    with open(piece.path, "rb") as handle:
        handle.seek(piece.start)
        data = handle.read(piece.stop - piece.start)
    options = csv_options(len(piece.framer.columns), piece.delimiter)
    table = pacsv.read_csv(pa.BufferReader(data), **options)
    return piece.framer.frame(table, 0)


def _parquet_files(path: Path, option: str) -> list[Path]:
    if path.is_file():
        return [path]
    files = sorted(p for p in path.iterdir() if p.suffix.lower() in (".parquet", ".pq")
                   and p.is_file())
    if not files:
        raise TableIOError(f"{option} '{path}' is a folder without .parquet files; give a "
                           "Parquet folder, a .parquet or a .csv file")
    return files


def _parquet_pieces(path: Path, option: str) -> tuple[list[_Piece], str, str]:
    files = _parquet_files(path, option)
    sources = [_ParquetChunks(f, option) for f in files]
    columns = sources[0].framer.columns
    labels: dict[str, dict[Any, None]] = {}
    for source in sources:
        if source.framer.columns != columns:
            raise DataError(f"{option} '{source.path}' has other columns than "
                            f"'{sources[0].path}'; every file of a folder holds the same "
                            "columns")
        for name, values in (source.framer.categories or {}).items():
            labels.setdefault(name, {}).update(dict.fromkeys(values))
    # Labels in order of appearance over the files, as a read of their concatenation gives.
    categories = {name: list(values) for name, values in labels.items()}
    pieces = []
    for source in sources:
        framer = _Framer("parquet", columns, source.schema.metadata, categories)
        pieces += [_Piece(source.path, framer, row_group=i)
                   for i in range(source.file.metadata.num_row_groups)]
    return pieces, ",", "."


def _csv_cuts(path: Path, start: int, stop: int, delimiter: str, size: int,
              option: str) -> list[int]:
    """Byte offsets of row ends (after their line break) about every ``size`` bytes."""
    data = np.memmap(path, dtype=np.uint8, mode="r") if stop > start else np.zeros(0, np.uint8)
    fences = {ord(delimiter), _LF, _CR, _QUOTE}
    cuts = [start]
    quotes = 0  # quotes in [start, block)
    block = start
    while block < stop:
        end = min(stop, block + size)
        view = data[block:end]
        where = np.flatnonzero(view == _QUOTE) + block
        opening = ((quotes + np.arange(len(where))) % 2) == 0
        before = data[np.maximum(where - 1, 0)]
        after = data[np.minimum(where + 1, len(data) - 1)]
        bad = (opening & (where > start) & ~np.isin(before, list(fences))) | (
            ~opening & (where + 1 < stop) & ~np.isin(after, list(fences)))
        if bad.any():
            raise OptionError(
                f"{param('cluster')}: {option} '{path}' has a quote inside an unquoted cell (byte "
                f"{int(where[np.argmax(bad)])}), so it cannot be cut between rows safely; fill "
                f"it without {param('cluster')} ({param('stream')}), or convert it to Parquet "
                "first")
        if block > start and cuts[-1] < block:
            breaks = np.flatnonzero(view == _LF) + block
            even = (quotes + np.searchsorted(where, breaks)) % 2 == 0
            if even.any():
                cut = int(breaks[np.argmax(even)]) + 1
                if cut < stop:
                    cuts.append(cut)
        quotes += len(where)
        block = end
    return cuts + [stop]


def _csv_pieces(path: Path, option: str, size: int) -> tuple[list[_Piece], str, str]:
    source = _CsvChunks(path, option)
    head = source.tables(2000)
    next(head, None)  # the decimal mark is sniffed on the first rows
    head.close()
    layout = source.layout
    cuts = _csv_cuts(path, layout.start, layout.stop, layout.delimiter, size, option)
    pieces = [_Piece(path, source.framer, start=a, stop=b, delimiter=layout.delimiter)
              for a, b in zip(cuts[:-1], cuts[1:], strict=True) if b > a]
    return pieces, layout.delimiter, source.decimal


def partitions(path: str | os.PathLike[str], *, partition_bytes: int = DEFAULT_PARTITION_BYTES,
               option: str = "FILE") -> tuple[Any, str, str]:
    """A lazy ``dask.dataframe`` of a file or Parquet folder, as read_table reads it.

    Returns
    -------
    frame : dask.dataframe.DataFrame
        One partition a Parquet row group, or about ``partition_bytes`` of CSV.
    delimiter, decimal : str
        The CSV file's (``,`` and ``.`` for Parquet).
    """
    import dask
    import dask.dataframe as dd

    path = Path(path)
    if not path.exists():
        raise TableIOError(f"{option} '{path}': no such file or folder; check the path")
    if path.is_dir() or path.suffix.lower() in (".parquet", ".pq"):
        pieces, delimiter, decimal = _parquet_pieces(path, option)
    elif path.suffix.lower() == ".csv":
        pieces, delimiter, decimal = _csv_pieces(path, option, partition_bytes)
    else:
        raise TableIOError(f"{option} '{path}': give a .csv or .parquet file or a folder of "
                           ".parquet files")
    if not pieces:
        raise TableIOError(f"{option} '{path}' has a header but no rows; give a file with data")
    with dask.config.set({"dataframe.convert-string": False}):
        meta = _read_piece(pieces[0]).iloc[:0]
        frame = dd.from_map(_read_piece, pieces, meta=meta, enforce_metadata=False)
    return frame, delimiter, decimal


def _fill_partition(frame: pd.DataFrame, job: _Job, folder: str,
                    partition_info: dict | None = None) -> pd.DataFrame:
    """Fill one partition, write it as ``part-NNNNN.parquet``; return its report as JSON."""
    number = partition_info["number"] if partition_info else 0
    chunk = Table(frame, job.path, job.framer.format, job.delimiter, job.decimal)
    typed, filled, part, tokens = fill_chunk(job, chunk)
    out = finish_output(chunk, job.plan, typed, filled, text_output=False)
    target = Path(folder) / f"part-{number:05d}.parquet"
    pq.write_table(pa.Table.from_pandas(out, preserve_index=False), target)  # rerun: same bytes
    report = {"filled": part.filled, "methods": part.methods, "dropped": part.dropped,
              "excluded": part.excluded, "tokens": tokens, "rows": len(out)}
    return pd.DataFrame({"report": [json.dumps(report)]}, dtype=object)


def _same_schema(folder: Path) -> None:
    """Cast every part to the first one's schema (an all-blank partition may parse to
    another type), as the streaming writer casts later chunks."""
    parts = sorted(folder.glob("part-*.parquet"))
    schema = pq.read_schema(parts[0])
    for part in parts[1:]:
        if pq.read_schema(part).equals(schema, check_metadata=True):
            continue
        try:
            table = pq.read_table(part).cast(schema)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
            raise DataError(f"'{part.name}': a partition's columns have other types than the "
                            f"first one's ({_short_reason(exc)}); fill this file without "
                            f"{param('cluster')}") from None
        pq.write_table(table, part)


def cluster_fill(
    path: str | os.PathLike[str],
    out_dir: str | os.PathLike[str],
    fitted: FittedFill,
    plan: Plan,
    client: Any,
    *,
    partition_bytes: int = DEFAULT_PARTITION_BYTES,
    progress: Progress | None = None,
    report: FillReport | None = None,
    option: str = "FILE",
) -> FillReport:
    """Fill a file or Parquet folder on a Dask cluster; write a Parquet folder, atomically.

    Parameters
    ----------
    path : path-like
        A CSV or Parquet file, or a folder of Parquet files.
    out_dir : path-like
        The output folder: it must not exist yet.
    fitted : FittedFill
        Fitted methods (:func:`imputelab.fill.frame.fit_plan`,
        :func:`imputelab.fill.streamed.fit_sample` or a loaded model's ``fitted``).
    plan : Plan
        The plan ``fitted`` was made from.
    client : distributed.Client
    partition_bytes : int
        Bytes of CSV per partition.
    progress : callable, optional
        ``progress(done, total)`` in partitions.
    report : FillReport, optional
        Report to continue.
    option : str
        How the input is named in error messages.

    Returns
    -------
    FillReport

    Raises
    ------
    TableIOError, DataError, OptionError
        Unreadable input, missing columns, an existing ``out_dir``, a CSV file that cannot be
        cut between rows.
    """
    out_dir = Path(out_dir)
    report = report if report is not None else FillReport()
    if out_dir.exists():
        raise OptionError(f"{param('out')} '{out_dir}' exists; with {param('cluster')} give a new "
                          "folder name")
    frame, delimiter, decimal = partitions(path, partition_bytes=partition_bytes,
                                           option=option)
    columns = [str(c) for c in frame.columns]
    check_new_file(columns, Path(path), fitted, plan, report, option)
    framer = _Framer("csv" if Path(path).suffix.lower() == ".csv" else "parquet", columns)
    job = _Job(fitted, plan, framer, Path(path), delimiter, decimal, "parquet", _specs(plan))
    with atomic_dir(out_dir) as tmp:
        [shipped] = client.scatter([job], broadcast=True, hash=False)
        reports = frame.map_partitions(_fill_partition, shipped, str(tmp),
                                       meta=pd.DataFrame({"report": []}, dtype=object),
                                       enforce_metadata=False, align_dataframes=False)
        parts = _gather(client.compute(reports.to_delayed()), progress,
                        f"{option} '{path}'", out_dir)
        _same_schema(tmp)
    totals = _Totals(report)
    for part in parts:
        totals.add(FillReport(**{k: part[k] for k in ("filled", "methods", "dropped",
                                                      "excluded")}), part["tokens"])
    return totals.close()



def _gather(futures: list[Any], progress: Progress | None, source: str,
            out_dir: Path) -> list[dict[str, Any]]:
    """The partitions' reports, in partition order, gathered as the workers finish."""
    from distributed import as_completed

    found: dict[str, Any] = {}
    for done, future in enumerate(as_completed(futures), start=1):
        try:
            found[future.key] = worker_result(future)
        except OSError as exc:
            raise TableIOError(
                f"a worker could not read {source} or write '{out_dir}' "
                f"({_short_reason(exc)}); every worker must see both paths (one machine "
                "or a shared file system)") from None
        if progress is not None:
            progress(done, len(futures))
    return [json.loads(found[f.key]["report"].iloc[0]) for f in futures]
