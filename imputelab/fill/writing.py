"""Writers of a streamed fill's output: CSV bytes as pandas' ``to_csv`` writes them, built with
Arrow kernels, and Parquet appended chunk by chunk under the first chunk's schema.
"""

from __future__ import annotations

import csv
import functools
import io
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from imputelab.errors import DataError
from imputelab.io.tables import _short_reason

__all__: list[str] = []


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

