"""Reading and writing tables: the only core module that opens paths.

CSV files are read with every column as text, exactly as written (blank cells are ``""``), so
that the survey can see disguised missing values before anything is parsed. Parquet files are
read with their own types. Writing always goes to a temporary file beside the target that is
renamed into place, so a failure never leaves a partial output.
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import io
import os
import re
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from imputelab.errors import DataError, TableIOError, param

__all__ = ["FORMATS", "Table", "atomic_dir", "atomic_path", "check_file", "file_fingerprint",
           "read_table", "table_format", "write_table"]

FORMATS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}
_SNIFF_BYTES = 1 << 16
_DELIMITERS = [",", ";", "\t", "|"]


@dataclass(frozen=True)
class Table:
    """A table as read from a file.

    Attributes
    ----------
    frame : DataFrame
        For CSV every column is text (``str`` dtype, blanks as ``""``); for Parquet the
        file's own types.
    path : Path
        Where it was read from.
    format : {"csv", "parquet"}
        The file format.
    delimiter, decimal : str
        The CSV dialect that was sniffed (``","`` and ``"."`` for Parquet).
    fingerprint : str
        SHA-256 of the file's bytes.
    """

    frame: pd.DataFrame
    path: Path
    format: str
    delimiter: str = ","
    decimal: str = "."
    fingerprint: str = ""

    @property
    def is_text(self) -> bool:
        """True when every cell is the text written in the file (CSV input)."""
        return self.format == "csv"


def table_format(path: str | os.PathLike[str], *, option: str = "FILE") -> str:
    """Return ``"csv"`` or ``"parquet"`` from the file name's extension.

    Raises
    ------
    TableIOError
        When the extension is neither.
    """
    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise TableIOError(
            f"{option} '{path}': unknown extension '{suffix or '(none)'}'; use .csv or .parquet"
        )
    return FORMATS[suffix]


def file_fingerprint(path: str | os.PathLike[str]) -> str:
    """SHA-256 hex digest of a file's bytes, read in blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def check_file(path: Path, option: str) -> None:
    """Raise a TableIOError unless ``path`` is a non-empty regular file (named by ``option``)."""
    if not path.exists():
        raise TableIOError(f"{option} '{path}': no such file; check the path")
    if not path.is_file():
        what = "a folder" if path.is_dir() else "a special file"
        raise TableIOError(
            f"{option} '{path}' is not a file; give the path of a .csv or .parquet file, "
            f"not {what}"
        )
    if path.stat().st_size == 0:
        raise TableIOError(f"{option} '{path}' is empty; give a file with a header and rows")


def read_table(path: str | os.PathLike[str], *, option: str = "FILE") -> Table:
    """Read a CSV or Parquet file.

    Parameters
    ----------
    path : path-like
        The file. Its extension chooses the format.
    option : str
        How the file is named in error messages (the command-line option that gave it).

    Returns
    -------
    Table

    Raises
    ------
    TableIOError
        Missing, unreadable, empty, header-only or undecodable files, unknown extensions.
    DataError
        Duplicate column names.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("a,b\\n1,x\\n,y\\n")
    >>> read_table(p).frame["a"].tolist()
    ['1', '']
    """
    path = Path(path)
    fmt = table_format(path, option=option or param("out"))
    check_file(path, option)
    try:
        fingerprint = file_fingerprint(path)
    except OSError as exc:
        raise TableIOError(f"{option} '{path}' cannot be read: {exc.strerror}") from None
    if fmt == "csv":
        frame, delimiter, decimal = _read_csv(path, option)
    else:
        frame, delimiter, decimal = _read_parquet(path, option), ",", "."
    if frame.shape[1] == 0:
        raise TableIOError(f"{option} '{path}' has no columns")
    if len(frame) == 0:
        raise TableIOError(f"{option} '{path}' has a header but no rows; give a file with data")
    return Table(frame, path, fmt, delimiter, decimal, fingerprint)


def _read_csv(path: Path, option: str) -> tuple[pd.DataFrame, str, str]:
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        # The utf-8-sig codec counts offsets from the end of the BOM; the message names the
        # offset in the file, where a hex viewer would show the byte.
        offset = exc.start + (len(codecs.BOM_UTF8) if raw.startswith(codecs.BOM_UTF8) else 0)
        raise TableIOError(
            f"{option} '{path}' is not valid UTF-8 (byte 0x{raw[offset]:02x} at offset "
            f"{offset}); re-save it as UTF-8"
        ) from None
    if not text.strip():
        raise TableIOError(f"{option} '{path}' is empty; give a file with a header and rows")
    delimiter = _sniff_delimiter(text[:_SNIFF_BYTES])
    header = next(csv.reader(io.StringIO(text), delimiter=delimiter))
    header = [name.strip() for name in header]
    _check_header(header, path, option)
    # In a one-column file a blank line is a row whose only cell is blank, so it is kept.
    # With several columns a row of blanks is written with delimiters (",,"), and a bare blank
    # line is spacing, so it is skipped.
    one_column = len(header) == 1
    if one_column:
        text = _drop_trailing_blank_lines(text)
    try:
        frame = pd.read_csv(
            io.StringIO(text),
            sep=delimiter,
            dtype=str,
            keep_default_na=False,
            na_filter=False,
            skipinitialspace=False,
            skip_blank_lines=not one_column,
            engine="c",
        )
    except (pd.errors.ParserError, ValueError) as exc:
        first = str(exc).strip().splitlines()[0]
        raise TableIOError(f"{option} '{path}' is not a well-formed CSV file: {first}") from None
    frame.columns = header
    frame = frame.astype("str")
    return frame, delimiter, _sniff_decimal(frame, delimiter)


def _drop_trailing_blank_lines(text: str) -> str:
    """Cut blank lines at the end of the text, keeping the last line's terminator.

    Editors and exports often end a file with an extra empty line; it is not a row. A real
    blank last cell of a one-column file is written quoted (``""``) by CSV writers.
    """
    content = text.rstrip(" \t\r\n")
    tail = text[len(content):]
    breaks = [i for i in (tail.find("\r"), tail.find("\n")) if i >= 0]
    if not breaks:
        return text
    first = min(breaks)
    terminator = "\r\n" if tail.startswith("\r\n", first) else tail[first]
    return text[: len(content) + first] + terminator


def _check_header(header: list[str], path: Path, option: str) -> None:
    seen: set[str] = set()
    dups = sorted({name for name in header if name in seen or seen.add(name)})
    if dups:
        raise DataError(
            f"{option} '{path}' has duplicate column names: {', '.join(dups)}; rename them"
        )
    if any(name == "" for name in header):
        position = header.index("") + 1
        raise DataError(f"{option} '{path}': column {position} has no name; give it one")


def _sniff_delimiter(sample: str) -> str:
    lines = [line for line in sample.splitlines()[:50] if line.strip()]
    if not lines:
        return ","
    try:
        guess = csv.Sniffer().sniff("\n".join(lines), delimiters="".join(_DELIMITERS)).delimiter
    except csv.Error:
        # The sniffer gives up on one-column files and very regular numbers; fall back to the
        # delimiter that splits the header into the most fields consistently.
        counts = {d: lines[0].count(d) for d in _DELIMITERS}
        best = max(counts, key=counts.get)
        guess = best if counts[best] > 0 else ","
    if _splits_evenly(sample, guess):
        return guess
    # The sniffer counts delimiters inside quoted cells too (a ';' in a quoted text of a
    # comma file); keep to a delimiter whose quoted parse gives every row the same width.
    return next((d for d in _DELIMITERS if _splits_evenly(sample, d)), guess)


def _splits_evenly(sample: str, delimiter: str) -> bool:
    """Whether parsing the sample (quotes honoured) gives one width of 2+ fields to all rows."""
    try:
        rows = [r for r in csv.reader(io.StringIO(sample), delimiter=delimiter) if r]
    except csv.Error:
        return False
    if len(rows) > 1:
        rows = rows[:-1]  # the sample may end inside the last row
    widths = {len(r) for r in rows}
    return len(widths) == 1 and widths.pop() > 1


_COMMA_DECIMAL = re.compile(r"^-?\d+,\d+$")
_POINT_DECIMAL = re.compile(r"^-?\d+\.\d+$")


def _sniff_decimal(frame: pd.DataFrame, delimiter: str) -> str:
    if delimiter == ",":
        return "."
    sample = frame.head(2000)
    comma = point = 0
    for column in sample.columns:
        values = sample[column].astype(str)
        comma += int(values.str.match(_COMMA_DECIMAL).sum())
        point += int(values.str.match(_POINT_DECIMAL).sum())
    return "," if comma > point else "."


def _read_parquet(path: Path, option: str) -> pd.DataFrame:
    try:
        with pq.ParquetFile(path) as parquet:
            # The names come from the schema before any data is read: reading resolves columns
            # by name, which fails on duplicates with a message that does not name them.
            _check_header(list(parquet.schema_arrow.names), path, option)
            arrow = parquet.read()
    except (pa.ArrowException, OSError) as exc:
        raise TableIOError(
            f"{option} '{path}' is not a readable Parquet file ({_short_reason(exc)}); check "
            "that it is a complete Parquet file or export it again"
        ) from None
    mapping = {t: pd.Int64Dtype() for t in (pa.int8(), pa.int16(), pa.int32(), pa.int64())}
    mapping.update({pa.uint8(): pd.Int64Dtype(), pa.uint16(): pd.Int64Dtype(),
                    pa.uint32(): pd.Int64Dtype()})
    mapping[pa.bool_()] = pd.BooleanDtype()
    return arrow.to_pandas(types_mapper=mapping.get)


def _short_reason(exc: BaseException) -> str:
    """First sentence of an exception's message, for quoting inside another sentence."""
    lines = str(exc).strip().splitlines()
    first = lines[0] if lines else type(exc).__name__
    return first.split(". ")[0].rstrip(".") or type(exc).__name__


@contextmanager
def atomic_path(target: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it to ``target`` on success.

    On any exception the temporary file is removed and ``target`` is left as it was.
    """
    target = Path(target)
    parent = target.parent if str(target.parent) else Path(".")
    if not parent.is_dir():
        raise TableIOError(f"cannot write '{target}': folder '{parent}' does not exist")
    handle, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=parent)
    os.close(handle)
    tmp = Path(name)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes owner-only files; outputs follow the umask
    try:
        yield tmp
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()


@contextmanager
def atomic_dir(target: str | os.PathLike[str], *, replace: bool = False) -> Iterator[Path]:
    """Yield a temporary folder beside ``target``; rename it to ``target`` on success.

    ``target`` must not exist or be an empty folder, unless ``replace``: then a folder there
    is moved aside, the new one renamed into place, and the old one removed (put back when
    the rename fails). Whether a folder may be replaced is the caller's decision.

    On any exception the temporary folder is removed and ``target`` is left as it was.

    Raises
    ------
    TableIOError
        When the parent folder does not exist, or the folder cannot be renamed into place.
    """
    target = Path(target)
    parent = target.parent if str(target.parent) else Path(".")
    if not parent.is_dir():
        raise TableIOError(f"cannot write '{target}': folder '{parent}' does not exist")
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=parent))
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o777 & ~umask)  # mkdtemp makes owner-only folders; outputs follow the umask
        yield tmp
        try:
            if replace and target.exists():
                _swap_dir(tmp, target, parent)
            else:
                os.replace(tmp, target)  # atomic; an empty folder there is replaced
        except OSError as exc:
            raise TableIOError(f"cannot write '{target}': {exc.strerror or exc}") from None
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)


def _swap_dir(new: Path, target: Path, parent: Path) -> None:
    """Put folder ``new`` where folder ``target`` is; the old one back if that fails."""
    old = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".old", dir=parent))
    try:
        os.replace(target, old / "previous")
        try:
            os.replace(new, target)
        except OSError:
            os.replace(old / "previous", target)
            raise
    finally:
        shutil.rmtree(old, ignore_errors=True)


def write_table(
    frame: pd.DataFrame,
    path: str | os.PathLike[str],
    *,
    delimiter: str = ",",
    option: str | None = None,
) -> Path:
    """Write a frame as CSV or Parquet (by extension), atomically.

    Text frames (every column ``str``) are written cell for cell; blank cells as empty fields.

    Returns
    -------
    Path
        The written file.
    """
    path = Path(path)
    fmt = table_format(path, option=option or param("out"))
    with atomic_path(path) as tmp:
        if fmt == "csv":
            with codecs.open(tmp, "w", encoding="utf-8") as handle:
                frame.to_csv(handle, index=False, sep=delimiter, lineterminator="\n")
        else:
            pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), tmp)
    return path
