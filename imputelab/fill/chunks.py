"""A file's rows chunk by chunk, each exactly the frame ``read_table`` gives for those rows.

A CSV file is read with :func:`pyarrow.csv.open_csv` (every column as text, as
:func:`imputelab.io.tables.read_table` reads it, with the same sniffed delimiter, header and
decimal mark) and a Parquet file with :meth:`pyarrow.parquet.ParquetFile.iter_batches`. Used by
the streamed fill, its reservoir sample and the partitioned fill.
"""

from __future__ import annotations

import codecs
import csv
import io
import itertools
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from imputelab.errors import TableIOError
from imputelab.io.tables import (
    _SNIFF_BYTES,
    _check_header,
    _short_reason,
    _sniff_decimal,
    _sniff_delimiter,
    check_file,
    table_format,
)

__all__ = ["Progress", "csv_options"]

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
        # Every chunk but the last holds chunk_rows rows: this many hold the sniffer's rows.
        head = list(itertools.islice(chunks, -(-_DECIMAL_ROWS // chunk_rows)))
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

