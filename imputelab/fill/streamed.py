"""Fills of files larger than memory: one pass to sample rows for fitting, one pass to fill.

A CSV file is read with :func:`pyarrow.csv.open_csv` (every column as text, as
:func:`imputelab.io.tables.read_table` reads it) and a Parquet file with
:meth:`pyarrow.parquet.ParquetFile.iter_batches`. Every chunk becomes exactly the frame
:func:`~imputelab.io.tables.read_table` would give for those rows, goes through the plan's cleaning,
the fitted methods, the missing indicators and (CSV) the text rendering of the in-memory
fill, and is appended to the output; memory stays flat in the file's size. The output is the
same, byte for byte for CSV and value for value (same schema) for Parquet, as the in-memory
fill with methods fitted on the same rows.

Fitting needs the rows in memory, so a large file is fitted on a uniform sample of its rows,
drawn in the same single pass that computes its fingerprint (reservoir sampling).
"""

from __future__ import annotations

import codecs
import csv
import functools
import hashlib
import io
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
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
from joblib import Parallel, delayed

from imputelab.checks import check_count, check_seed
from imputelab.errors import DataError, OptionError, TableIOError, param
from imputelab.executors.seeds import derive_seed
from imputelab.fill.frame import (
    FillReport,
    FittedFill,
    _format,
    _specs,
    check_plan,
    clean_with_plan,
    finish_output,
    fit_plan,
    missing_indicators,
)
from imputelab.io.columns import new_token_warnings
from imputelab.io.tables import (
    _SNIFF_BYTES,
    Table,
    _check_header,
    _short_reason,
    _sniff_decimal,
    _sniff_delimiter,
    atomic_path,
    check_file,
    file_fingerprint,
    table_format,
)
from imputelab.score.plan import Plan

__all__ = [
    "DEFAULT_CHUNK_ROWS",
    "DEFAULT_FIT_SAMPLE",
    "fit_sample",
    "reservoir_sample",
    "stream_fill",
]

DEFAULT_CHUNK_ROWS = 64_000
DEFAULT_FIT_SAMPLE = 200_000
# read_table sniffs the decimal mark on the first rows of the frame (io._sniff_decimal).
_DECIMAL_ROWS = 2000
# Arrow's default block; larger blocks raise memory (read-ahead), not speed.
_BLOCK_BYTES = 1 << 20
# read_table's Parquet types (io._read_parquet): integers and booleans as nullable dtypes.
_PARQUET_TYPES = {t: pd.Int64Dtype() for t in (pa.int8(), pa.int16(), pa.int32(), pa.int64(),
                                                pa.uint8(), pa.uint16(), pa.uint32())}
_PARQUET_TYPES[pa.bool_()] = pd.BooleanDtype()

Progress = Callable[[int, int], None]


# ----------------------------------------------------------------------------- the frames


@dataclass(frozen=True)
class _Framer:
    """Turns a chunk's Arrow table into the frame read_table gives for those rows.

    Plain data, so that worker processes can be sent it.
    """

    format: str
    columns: list[str]
    metadata: dict[bytes, bytes] | None = None  # a Parquet file's schema metadata
    categories: dict[str, list[Any]] | None = None  # labels of its dictionary columns

    def frame(self, table: pa.Table, offset: int) -> pd.DataFrame:
        """The rows ``offset, offset + 1, ...`` of the file, as read_table reads them."""
        if self.format == "csv":  # text columns under the file's header
            frame = table.to_pandas()
            frame.columns = self.columns
            frame.index = pd.RangeIndex(offset, offset + len(frame))
            return frame
        # The file's pandas metadata applies (index columns, labels' order).
        frame = table.replace_schema_metadata(self.metadata).to_pandas(
            types_mapper=_PARQUET_TYPES.get)
        if isinstance(frame.index, pd.RangeIndex):
            frame.index = pd.RangeIndex(offset, offset + len(frame))
        for name, labels in (self.categories or {}).items():
            if name in frame.columns and isinstance(frame[name].dtype, pd.CategoricalDtype):
                frame[name] = frame[name].cat.set_categories(labels)
        return frame


# ------------------------------------------------------------------------------ CSV input


@dataclass
class _CsvLayout:
    """Where a CSV file's rows are, and how read_table would read them."""

    path: Path
    delimiter: str
    header: list[str]
    start: int  # first byte after the header row
    stop: int  # end of the bytes that hold rows
    size: int


def _first_row_end(text: str, delimiter: str) -> tuple[int, int] | None:
    """Offset and terminator length of the end of the first CSV row, or None if not in text.

    A quote opens a quoted field only at the start of a field, as in the csv module.
    """
    i, n = 0, len(text)
    field_start, quoted = True, False
    while i < n:
        c = text[i]
        if quoted:
            if c == '"':
                if i + 1 < n and text[i + 1] == '"':
                    i += 2
                    continue
                if i + 1 == n:
                    return None  # the next character decides
                quoted = False
        elif c == '"' and field_start:
            quoted = True
        elif c == delimiter:
            field_start = True
            i += 1
            continue
        elif c in "\r\n":
            if c == "\r":
                if i + 1 == n:
                    return None
                return i, 2 if text[i + 1] == "\n" else 1
            return i, 1
        field_start = False
        i += 1
    return None


def _content_stop(path: Path, size: int) -> int:
    """End of a one-column file's rows: blank lines at the end are not rows.

    The byte form of io._drop_trailing_blank_lines: cut after the first line break that
    follows the last byte that is not a space, tab or line break.
    """
    blanks = b" \t\r\n"
    with open(path, "rb") as handle:
        end, tail = size, b""
        while end > 0:
            start = max(0, end - (1 << 16))
            handle.seek(start)
            block = handle.read(end - start)
            tail = block + tail
            stripped = block.rstrip(blanks)
            if stripped:
                content = start + len(stripped)
                break
            end = start
        else:
            return size
    rest = tail[len(tail) - (size - content):]
    breaks = [i for i in (rest.find(b"\r"), rest.find(b"\n")) if i >= 0]
    if not breaks:
        return size
    first = min(breaks)
    return content + first + (2 if rest.startswith(b"\r\n", first) else 1)


def _csv_layout(path: Path, option: str) -> _CsvLayout:
    """Sniff a CSV file's dialect and header exactly as read_table does, from its head."""
    size = path.stat().st_size
    want = 4 * _SNIFF_BYTES + 4  # enough bytes for the sniffer's characters
    with open(path, "rb") as handle:
        while True:
            raw = handle.read(want) if want <= size else handle.read()
            handle.seek(0)
            whole = len(raw) >= size
            try:
                text = codecs.getincrementaldecoder("utf-8-sig")().decode(raw, final=whole)
            except UnicodeDecodeError as exc:
                bom = len(codecs.BOM_UTF8) if raw.startswith(codecs.BOM_UTF8) else 0
                offset = exc.start + bom
                raise TableIOError(
                    f"{option} '{path}' is not valid UTF-8 (byte 0x{raw[offset]:02x} at offset "
                    f"{offset}); re-save it as UTF-8"
                ) from None
            if whole and not text.strip():
                raise TableIOError(
                    f"{option} '{path}' is empty; give a file with a header and rows")
            delimiter = _sniff_delimiter(text[:_SNIFF_BYTES])
            found = _first_row_end(text, delimiter)
            if found is not None or whole:
                break
            want *= 4  # a very long header row
    end, terminator = found if found is not None else (len(text), 0)
    header = next(csv.reader(io.StringIO(text[:end]), delimiter=delimiter), [])
    header = [name.strip() for name in header]
    if not header:
        raise TableIOError(f"{option} '{path}' has no columns")
    _check_header(header, path, option)
    bom = len(codecs.BOM_UTF8) if raw.startswith(codecs.BOM_UTF8) else 0
    start = bom + len(text[: end + terminator].encode("utf-8"))
    # In a one-column file a blank line is a row (read_table keeps them), except at the end.
    stop = _content_stop(path, size) if len(header) == 1 else size
    return _CsvLayout(path, delimiter, header, start, max(start, stop), size)


class _Window(io.RawIOBase):
    """Bytes ``[start, stop)`` of a file, hashed and counted as they are read."""

    def __init__(self, path: Path, start: int, stop: int, digest: Any = None):
        super().__init__()
        self._handle = open(path, "rb")  # noqa: SIM115 - closed with the window
        self._handle.seek(start)
        self._left = stop - start
        self._digest = digest
        self.done = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer: Any) -> int:
        n = min(len(buffer), self._left)
        if n <= 0:
            return 0
        view = memoryview(buffer)[:n]
        got = self._handle.readinto(view) or 0
        if got > 1 and got < self._left and view[got - 1] == 0x0D:
            # Arrow's reader (pyarrow 26) loses the "\n" of a "\r\n" inside a quoted cell
            # when a block ends between the two: keep the "\r" for the next block.
            got -= 1
            self._handle.seek(-1, os.SEEK_CUR)
        if self._digest is not None:
            self._digest.update(view[:got])
        self._left -= got
        self.done += got
        return got

    def close(self) -> None:
        self._handle.close()
        super().close()


def _blank_row(row: Any) -> str:
    # pandas' C parser skips lines holding only spaces and tabs when it skips blank lines
    # (skip_blank_lines, read_table's setting for several columns); Arrow calls them rows.
    return "skip" if row.text.strip(" \t\r\n") == "" else "error"


def csv_options(n_columns: int, delimiter: str) -> dict[str, Any]:
    """Arrow's CSV options that read rows as read_table does: every cell as text."""
    names = [f"c{i}" for i in range(n_columns)]
    return {
        "read_options": pacsv.ReadOptions(column_names=names, block_size=_BLOCK_BYTES),
        "parse_options": pacsv.ParseOptions(
            delimiter=delimiter, quote_char='"', double_quote=True, escape_char=False,
            newlines_in_values=True, ignore_empty_lines=n_columns > 1,
            invalid_row_handler=_blank_row if n_columns > 1 else None),
        "convert_options": pacsv.ConvertOptions(
            column_types=dict.fromkeys(names, pa.string()), null_values=[],
            strings_can_be_null=False, quoted_strings_can_be_null=False),
    }


class _CsvChunks:
    """A CSV file's rows as read_table's text frames, chunk by chunk."""

    def __init__(self, path: Path, option: str, *, digest: Any = None):
        self.path, self.option, self.format = path, option, "csv"
        self.layout = _csv_layout(path, option)
        self.framer = _Framer("csv", self.layout.header)
        self.digest = digest
        self.window: _Window | None = None
        self.decimal = "."

    @property
    def delimiter(self) -> str:
        return self.layout.delimiter

    @property
    def total(self) -> int:
        """Progress total: bytes."""
        return self.layout.size

    @property
    def done(self) -> int:
        return self.layout.start + (self.window.done if self.window else 0)

    def batches(self) -> Iterator[pa.RecordBatch]:
        layout = self.layout
        if self.digest is not None:
            with open(layout.path, "rb") as handle:
                self.digest.update(handle.read(layout.start))
        if layout.stop > layout.start:
            names = range(len(layout.header))
            self.window = _Window(layout.path, layout.start, layout.stop, self.digest)
            reader = None
            try:
                reader = pacsv.open_csv(self.window, **csv_options(len(names),
                                                                   layout.delimiter))
                for batch in reader:
                    if batch.num_rows:
                        yield batch
            except pa.ArrowException as exc:
                raise self._error(exc) from None
            finally:
                if reader is not None:
                    reader.close()
                self.window.close()
        if self.digest is not None:  # the bytes after the rows (a one-column file's blanks)
            with open(layout.path, "rb") as handle:
                handle.seek(self.done)
                for block in iter(lambda: handle.read(1 << 20), b""):
                    self.digest.update(block)

    def _error(self, exc: BaseException) -> TableIOError:
        message = str(exc).strip()
        if "UTF8" in message or "UTF-8" in message:
            return TableIOError(f"{self.option} '{self.path}' is not valid UTF-8; re-save it "
                                "as UTF-8")
        first = message.splitlines()[0] if message else type(exc).__name__
        return TableIOError(f"{self.option} '{self.path}' is not a well-formed CSV file: "
                            f"{first}")

    def tables(self, chunk_rows: int) -> Iterator[pa.Table]:
        """Arrow tables of ``chunk_rows`` rows; the decimal mark is sniffed on the first ones."""
        chunks = _rechunk(self.batches(), chunk_rows)
        head: list[pa.Table] = []
        rows = 0
        for table in chunks:
            head.append(table)
            rows += table.num_rows
            if rows >= _DECIMAL_ROWS:
                break
        if head:
            first = pa.concat_tables(head).slice(0, _DECIMAL_ROWS)
            self.decimal = _sniff_decimal(self.framer.frame(first, 0), self.layout.delimiter)
        yield from head
        yield from chunks


# -------------------------------------------------------------------------- Parquet input


class _ParquetChunks:
    """A Parquet file's rows as read_table's typed frames, chunk by chunk."""

    def __init__(self, path: Path, option: str):
        self.path, self.option, self.format = path, option, "parquet"
        self.delimiter, self.decimal = ",", "."
        try:
            self.file = pq.ParquetFile(path)
            self.schema = self.file.schema_arrow
        except (pa.ArrowException, OSError) as exc:
            raise self._error(exc) from None
        _check_header(list(self.schema.names), path, option)
        self._done = 0
        categories = self._categories()
        # The columns as read_table gives them: index columns of the metadata are not among them.
        empty = _Framer("parquet", [], self.schema.metadata).frame(self.schema.empty_table(), 0)
        self.framer = _Framer("parquet", list(empty.columns), self.schema.metadata,
                              categories)

    def _error(self, exc: BaseException) -> TableIOError:
        return TableIOError(
            f"{self.option} '{self.path}' is not a readable Parquet file ({_short_reason(exc)}); "
            "check that it is a complete Parquet file or export it again"
        )

    def _categories(self) -> dict[str, list[Any]]:
        """Labels of each dictionary column in the order a whole-file read gives them.

        Reading the whole file unifies the row groups' dictionaries in order of appearance;
        a chunk holds only its own, so the labels are gathered first (one cheap pass over
        those columns only).
        """
        names = [f.name for f in self.schema if pa.types.is_dictionary(f.type)]
        if not names:
            return {}
        seen: dict[str, dict[Any, None]] = {name: {} for name in names}
        try:
            for batch in self.file.iter_batches(columns=names):
                for name in names:
                    for value in batch.column(name).dictionary.to_pylist():
                        seen[name].setdefault(value, None)
        except (pa.ArrowException, OSError) as exc:
            raise self._error(exc) from None
        return {name: list(values) for name, values in seen.items()}

    @property
    def total(self) -> int:
        """Progress total: rows."""
        return self.file.metadata.num_rows

    @property
    def done(self) -> int:
        return self._done

    def batches(self) -> Iterator[pa.RecordBatch]:
        try:
            for batch in self.file.iter_batches(batch_size=64 * 1024):
                self._done += batch.num_rows
                if batch.num_rows:
                    yield batch
        except (pa.ArrowException, OSError) as exc:
            raise self._error(exc) from None

    def tables(self, chunk_rows: int) -> Iterator[pa.Table]:
        yield from _rechunk(self.batches(), chunk_rows)


def _open(path: str | os.PathLike[str], option: str, *,
          digest: Any = None) -> _CsvChunks | _ParquetChunks:
    path = Path(path)
    fmt = table_format(path, option=option)
    check_file(path, option)
    return _CsvChunks(path, option, digest=digest) if fmt == "csv" else _ParquetChunks(path,
                                                                                       option)


def _rechunk(batches: Iterator[pa.RecordBatch], rows: int) -> Iterator[pa.Table]:
    """Tables of exactly ``rows`` rows (the last may be shorter) from batches of any size."""
    pending: list[pa.RecordBatch] = []
    count = 0
    for batch in batches:
        pending.append(batch)
        count += batch.num_rows
        while count >= rows:
            table = pa.Table.from_batches(pending)
            yield table.slice(0, rows).combine_chunks()
            rest = table.slice(rows)
            pending = rest.to_batches()
            count = rest.num_rows
    if count:
        yield pa.Table.from_batches(pending).combine_chunks()


def _no_rows(source: _CsvChunks | _ParquetChunks) -> TableIOError:
    return TableIOError(f"{source.option} '{source.path}' has a header but no rows; give a "
                        "file with data")


# ------------------------------------------------------------------------ reservoir sample


def reservoir_sample(
    path: str | os.PathLike[str],
    n: int,
    *,
    seed: int,
    progress: Progress | None = None,
    option: str = "FILE",
) -> Table:
    """A uniform random sample of ``n`` rows of a file, drawn in one pass.

    Reservoir sampling, Algorithm R (Vitter 1985, "Random sampling with a reservoir", ACM
    Transactions on Mathematical Software 11(1):37-57): the first ``n`` rows fill the
    reservoir; row ``t`` (0-based) after them replaces a uniformly chosen slot with
    probability ``n / (t + 1)``, so every set of ``n`` rows is equally likely. The draws are
    vectorised per batch of rows and do not depend on how the file is split into batches.

    Parameters
    ----------
    path : path-like
        A CSV or Parquet file (by extension).
    n : int
        Rows to keep; a file with fewer rows is returned whole.
    seed : int
        Seed of the draws (the same seed and file give the same sample).
    progress : callable, optional
        ``progress(done, total)`` in bytes (CSV) or rows (Parquet).
    option : str
        How the file is named in error messages.

    Returns
    -------
    Table
        The sampled rows in file order, exactly as :func:`~imputelab.io.tables.read_table` reads
        them (CSV: text, same delimiter and decimal mark), indexed by their 0-based position
        in the file. Its ``fingerprint`` is that of the whole file, so
        :func:`~imputelab.fill.frame.check_plan` can compare it with a plan.

    Raises
    ------
    TableIOError
        As :func:`~imputelab.io.tables.read_table`.
    OptionError
        When ``n`` or ``seed`` is out of range.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("a\\n" + "".join(f"{i}\\n" for i in range(100)))
    >>> sample = reservoir_sample(p, 5, seed=0)
    >>> len(sample.frame), sample.frame.index.is_monotonic_increasing
    (5, True)
    """
    check_count(n, "fit_sample")
    check_seed(seed)
    digest = hashlib.sha256()
    source = _open(path, option, digest=digest)
    rng = np.random.default_rng(int(seed))
    pool: list[pa.Table] = []  # kept rows; slots point into their concatenation
    pool_rows = 0
    # slot -> row of the pool, and slot -> position in the file; grown as rows come, so a
    # large n costs nothing on a small file
    slot_row = slot_pos = np.zeros(0, dtype=np.int64)
    filled = seen = 0
    for table in source.tables(max(_DECIMAL_ROWS, min(n, 1 << 16))):
        m = table.num_rows
        take = min(m, n - filled)
        if filled + take > len(slot_row):
            size = min(n, max(2 * len(slot_row), filled + take))
            slot_row = np.concatenate([slot_row, np.zeros(size - len(slot_row), np.int64)])
            slot_pos = np.concatenate([slot_pos, np.zeros(size - len(slot_pos), np.int64)])
        if take:  # the first n rows fill the reservoir
            pool.append(table.slice(0, take))
            slot_row[filled:filled + take] = pool_rows + np.arange(take)
            slot_pos[filled:filled + take] = seen + np.arange(take)
            pool_rows += take
            filled += take
        if m > take:
            t = seen + np.arange(take, m)
            j = np.minimum(np.floor(rng.random(len(t)) * (t + 1)).astype(np.int64), t)
            hit = np.flatnonzero(j < n)
            if len(hit):
                # Several rows of one batch may land on one slot: the last one wins, as if
                # they had been placed one by one.
                slots, last = np.unique(j[hit][::-1], return_index=True)
                rows = (take + hit)[::-1][last]  # offsets within the batch
                pool.append(table.take(pa.array(rows)))
                slot_row[slots] = pool_rows + np.arange(len(rows))
                slot_pos[slots] = seen + rows
                pool_rows += len(rows)
        seen += m
        if pool_rows > 3 * n:  # drop the rows no slot points to any more
            live = pa.concat_tables(pool).take(pa.array(slot_row[:filled]))
            pool, pool_rows = [live], filled
            slot_row[:filled] = np.arange(filled)
        if progress is not None:
            progress(min(source.done, source.total), source.total)
    if seen == 0:
        raise _no_rows(source)
    if progress is not None and source.done < source.total:  # blank lines after the rows
        progress(source.total, source.total)
    order = np.argsort(slot_pos[:filled], kind="stable")
    rows = pa.concat_tables(pool).take(pa.array(slot_row[:filled][order]))
    frame = source.framer.frame(rows, 0)
    frame.index = pd.Index(slot_pos[:filled][order], dtype="int64")
    fingerprint = digest.hexdigest() if source.format == "csv" else file_fingerprint(source.path)
    return Table(frame, source.path, source.format, source.delimiter, source.decimal,
                 fingerprint)


def fit_sample(
    path: str | os.PathLike[str],
    plan: Plan,
    *,
    n: int = DEFAULT_FIT_SAMPLE,
    seed: int | None = None,
    force: bool = False,
    progress: Progress | None = None,
    option: str = "FILE",
) -> tuple[FittedFill, FillReport]:
    """Fit a plan's methods on a reservoir sample of a file (see :func:`reservoir_sample`).

    The sample is checked against the plan as :func:`~imputelab.fill.frame.fill_table` checks a
    file (fingerprint and columns; ``force`` lets a mismatch through with a warning). A file
    of at most ``n`` rows is fitted whole, so the fill equals the in-memory one.

    Parameters
    ----------
    path : path-like
    plan : Plan
    n : int
        Rows to fit on.
    seed : int, optional
        Seed of the sample; by default derived from the plan's seed.
    force : bool
    progress : callable, optional
        ``progress(done, total)`` of the sampling pass.
    option : str

    Returns
    -------
    fitted : FittedFill
    report : FillReport
        Warnings so far; pass it on to :func:`stream_fill`.
    """
    if seed is None:
        seed = derive_seed(int(plan.settings.get("seed", 0)), "fit-sample")
    sample = reservoir_sample(path, n, seed=seed, progress=progress, option=option)
    report = FillReport()
    report.warnings.extend(check_plan(plan, sample, force=force))
    typed, _ = clean_with_plan(sample, plan)
    planned = [c for c in typed.columns if c in plan.columns]
    return fit_plan(typed[planned], plan, report), report


# ------------------------------------------------------------------------------ CSV output


@functools.cache
def _csv_quoting(delimiter: str) -> tuple[str, np.ndarray | None, bool]:
    """What makes the csv module quote a field when pandas' ``to_csv`` writes it.

    ``to_csv`` (the in-memory write) writes through :func:`csv.writer` with its default
    quoting; asking the module itself keeps the streamed bytes equal whatever its version
    treats as special (Python 3.11 leaves a lone carriage return unquoted, for one).

    Returns
    -------
    pattern : str
        RE2 character class of the characters that make a field quoted.
    lookup : ndarray of bool or None
        The same as a 256-entry byte table, when every such character is ASCII (a fast
        test of a whole column's bytes at once).
    quote_empty : bool
        Whether a row's only field is quoted when it is empty.
    """

    def written(row: list[str]) -> str:
        buffer = io.StringIO()
        csv.writer(buffer, delimiter=delimiter, lineterminator="\n").writerow(row)
        return buffer.getvalue()

    special = [chr(c) for c in [*range(256), 0x85, 0x2028, 0x2029]
               if written([f"a{chr(c)}b", "x"]).startswith('"')]
    pattern = "[" + "".join(f"\\x{{{ord(c):02x}}}" for c in special) + "]"
    lookup = None
    if all(ord(c) < 128 for c in special):
        lookup = np.zeros(256, dtype=bool)
        lookup[[ord(c) for c in special]] = True
    return pattern, lookup, written([""]) == '""\n'


def _header_bytes(columns: list[str], delimiter: str) -> bytes:
    buffer = io.StringIO()
    csv.writer(buffer, delimiter=delimiter, lineterminator="\n").writerow(columns)
    return buffer.getvalue().encode("utf-8")


def _large(value: str) -> pa.Scalar:
    return pa.scalar(value, type=pa.large_string())


def _csv_body(columns: list[pa.Array], delimiter: str) -> pa.Buffer:
    """The bytes pandas' ``to_csv(index=False, lineterminator="\\n")`` writes for these text
    columns' rows (no header), built with Arrow kernels instead of a loop over rows."""
    pattern, lookup, quote_empty = _csv_quoting(delimiter)
    cells = []
    for column in columns:
        column = column.cast(pa.large_string()).fill_null("")
        if lookup is not None:
            data = column.buffers()[2]
            offsets = np.frombuffer(column.buffers()[1], dtype=np.int64)
            first, last = offsets[column.offset], offsets[column.offset + len(column)]
            raw = np.frombuffer(data, dtype=np.uint8)[first:last] if data is not None else []
            needs = bool(lookup[raw].any()) if len(raw) else False
        else:
            needs = True
        if needs:
            special = pc.match_substring_regex(column, pattern)
            quoted = pc.binary_join_element_wise(
                _large('"'), pc.replace_substring(column, '"', '""'), _large('"'), _large(""))
            column = pc.if_else(special, quoted, column)
        cells.append(column)
    if len(cells) == 1 and quote_empty:
        cells[0] = pc.if_else(pc.equal(pc.binary_length(cells[0]), 0), _large('""'), cells[0])
    lines = pc.binary_join_element_wise(pc.binary_join_element_wise(*cells, _large(delimiter)),
                                        _large(""), _large("\n"))
    offsets = np.frombuffer(lines.buffers()[1], dtype=np.int64)
    first, last = int(offsets[lines.offset]), int(offsets[lines.offset + len(lines)])
    return lines.buffers()[2].slice(first, last - first)


class _CsvOut:
    """Appends chunks of CSV rows to a file, as write_table writes their concatenation."""

    def __init__(self, path: Path, delimiter: str):
        self.handle = open(path, "wb")  # noqa: SIM115 - closed by close()
        self.delimiter = delimiter
        self.started = False

    def write(self, columns: list[str], data: Any) -> None:
        if not self.started:
            self.handle.write(_header_bytes(columns, self.delimiter))
            self.started = True
        self.handle.write(data)

    def close(self) -> None:
        self.handle.close()


class _ParquetOut:
    """Appends Arrow tables to a Parquet file, with the schema write_table gives the first."""

    def __init__(self, path: Path):
        self.path = path
        self.writer: pq.ParquetWriter | None = None
        self.schema: pa.Schema | None = None

    def write(self, columns: list[str], table: pa.Table) -> None:
        if self.writer is None:
            self.schema = table.schema
            self.writer = pq.ParquetWriter(self.path, self.schema)
        elif not table.schema.equals(self.schema):
            # A chunk whose column is all blank can parse to another unit or type.
            try:
                table = table.cast(self.schema)
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
                raise DataError(
                    f"'{self.path}': a later chunk's columns have other types than the first "
                    f"chunk's ({_short_reason(exc)}); fill this file in memory"
                ) from None
        self.writer.write_table(table)

    def close(self) -> None:
        if self.writer is not None:
            self.writer.close()


# ----------------------------------------------------------------------- one chunk's fill


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
        ``progress(done, total)`` after each chunk: bytes read for CSV input, rows for
        Parquet.
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
        CSV (pandas formats a timestamp column from all its values at once, so chunks
        cannot reproduce it).

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
    >>> report = stream_fill(folder / "t.csv", folder / "out.csv", fitted, plan,
    ...                      report=report)
    >>> (folder / "out.csv").read_text()
    'a,b\\n1,x\\n2,y\\n3,x\\n'
    """
    check_count(chunk_rows, "chunk_rows")
    check_count(n_jobs, "n_jobs")
    out_path = Path(out_path)
    out_format = table_format(out_path, option=param("out"))
    report = report if report is not None else FillReport()
    source = _open(path, option)
    columns = source.framer.columns
    needed = [c for c in fitted.encoding.kinds if c not in columns]
    if needed:
        raise DataError(f"{option} '{source.path}' lacks columns the fitted plan uses: "
                        f"{', '.join(needed)}")
    # The file to fill is new by design (the methods were fitted elsewhere or on a sample):
    # only its columns are checked, as fill_table checks the file beside ``fit_on``.
    shape = Table(pd.DataFrame(columns=columns), source.path, source.format)
    report.warnings.extend(check_plan(plan, shape, force=True, content=False))

    def make_job() -> _Job:
        return _Job(fitted, plan, source.framer, source.path, source.delimiter,
                    source.decimal, out_format, _specs(plan))

    filled: dict[str, int] = {}
    new_tokens: dict[str, dict[str, int]] = {}
    rows = 0
    with atomic_path(out_path) as tmp:
        writer = (_CsvOut(tmp, source.delimiter) if out_format == "csv" else _ParquetOut(tmp))
        try:
            for names, data, part, tokens in _results(source, make_job, chunk_rows, n_jobs):
                writer.write(names, data)
                rows += 1
                for name, count in part.filled.items():
                    filled[name] = filled.get(name, 0) + count
                for name, found in tokens.items():
                    merged = new_tokens.setdefault(name, {})
                    for token, count in found.items():
                        merged[token] = merged.get(token, 0) + count
                report.methods.update(part.methods)
                report.dropped, report.excluded = part.dropped, part.excluded
                if progress is not None:
                    progress(min(source.done, source.total), source.total)
            if rows == 0:
                raise _no_rows(source)
            if progress is not None and source.done < source.total:
                progress(source.total, source.total)
        finally:
            writer.close()
    report.filled.update(filled)
    for name, found in new_tokens.items():
        report.new_tokens[name] = dict(sorted(found.items(), key=lambda kv: (-kv[1], kv[0])))
    report.warnings.extend(new_token_warnings(report.new_tokens))
    return report
