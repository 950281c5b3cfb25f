"""Tests for io.tables: CSV dialect sniffing, text fidelity, Parquet types, errors, atomicity."""

from __future__ import annotations

import hashlib
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from imputelab.errors import DataError, TableIOError
from imputelab.io.tables import atomic_path, file_fingerprint, read_table, table_format, write_table


def _write(path: Path, content: str | bytes) -> Path:
    path.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)
    return path


def _named(path: Path) -> str:
    """Pattern matching the file as error messages quote it."""
    return re.escape(f"'{path}'")


def _listing(folder: Path) -> list[str]:
    # iterdir rather than glob: the temporary file starts with a dot.
    return sorted(p.name for p in folder.iterdir())


# ------------------------------------------------------------------------------ CSV dialect


@pytest.mark.parametrize(
    ("content", "delimiter", "decimal", "expected"),
    [
        ("a,b,c\n1,x,2.5\n3,y,4.5\n", ",", ".", {"a": ["1", "3"], "b": ["x", "y"],
                                                   "c": ["2.5", "4.5"]}),
        ("a;b;c\n1,5;x;2\n2,25;y;3\n", ";", ",", {"a": ["1,5", "2,25"], "b": ["x", "y"],
                                                   "c": ["2", "3"]}),
        ("a\tb\tc\n1\tx, y\t2\n3\tz, w\t4\n", "\t", ".", {"a": ["1", "3"],
                                                          "b": ["x, y", "z, w"],
                                                          "c": ["2", "4"]}),
        ("a|b|c\n1|x|2.5\n3|y|4.5\n", "|", ".", {"a": ["1", "3"], "b": ["x", "y"],
                                                  "c": ["2.5", "4.5"]}),
    ],
    ids=["comma", "semicolon-decimal-comma", "tab", "pipe"],
)
def test_csv_delimiter_and_decimal_are_sniffed(tmp_path, content, delimiter, decimal, expected):
    table = read_table(_write(tmp_path / "t.csv", content))
    assert table.format == "csv"
    assert table.is_text
    assert table.delimiter == delimiter
    assert table.decimal == decimal
    assert table.frame.to_dict("list") == expected


def test_utf8_bom_is_not_part_of_the_first_column_name(tmp_path):
    content = b"\xef\xbb\xbfcargo,temp\nd\xc3\xa9j\xc3\xa0,4\n"
    table = read_table(_write(tmp_path / "bom.csv", content))
    assert list(table.frame.columns) == ["cargo", "temp"]
    assert table.frame["cargo"].tolist() == ["d\u00e9j\u00e0"]


def test_cells_are_kept_exactly_as_text_and_blanks_are_empty_strings(tmp_path):
    content = "code,weight,note\n012,1.50,NA\n,2, spaced \n007,,null\n"
    frame = read_table(_write(tmp_path / "t.csv", content)).frame
    for column in frame.columns:
        # pandas 3: text columns are the str dtype, not object.
        assert pd.api.types.is_string_dtype(frame[column].dtype)
    # Nothing is parsed or stripped; tokens such as NA stay text for the survey to see.
    assert frame["code"].tolist() == ["012", "", "007"]
    assert frame["weight"].tolist() == ["1.50", "2", ""]
    assert frame["note"].tolist() == ["NA", " spaced ", "null"]


@pytest.mark.parametrize("newline", ["\n", "\r\n"], ids=["lf", "crlf"])
def test_blank_line_in_a_one_column_file_is_a_blank_cell(tmp_path, newline):
    # One field per line: a blank line is a record whose only field is empty (RFC 4180,
    # section 2, from memory: a record is one line of fields, and a field may be empty).
    content = newline.join(["temp", "4", "", "-18", "  ", "3"]) + newline
    frame = read_table(_write(tmp_path / "t.csv", content)).frame
    assert frame["temp"].tolist() == ["4", "", "-18", "  ", "3"]


@pytest.mark.parametrize("ending", ["\n\n", "\n\n\n", "\r\n\r\n", "\n \n", "\n\t"],
                         ids=["one", "two", "crlf", "spaces", "unterminated"])
def test_blank_lines_at_the_end_of_a_one_column_file_are_not_rows(tmp_path, ending):
    # Common practice, no source: editors leave empty lines at the end of a file; a real blank
    # last cell is written quoted ("") by CSV writers, as the next test shows.
    content = "temp\n4\n\n3" + ending
    frame = read_table(_write(tmp_path / "t.csv", content)).frame
    assert frame["temp"].tolist() == ["4", "", "3"]


def test_one_column_file_with_a_blank_last_cell_round_trips(tmp_path):
    frame = pd.DataFrame({"temp": ["4", "", "3", ""]}, dtype="str")
    path = write_table(frame, tmp_path / "out.csv")
    # Python's csv module (pandas' writer) quotes a lone empty field, so the row is not blank.
    assert path.read_text(encoding="utf-8") == 'temp\n4\n""\n3\n""\n'
    pd.testing.assert_frame_equal(read_table(path).frame, frame)


def test_one_column_file_of_blank_lines_has_no_rows(tmp_path):
    path = _write(tmp_path / "t.csv", "temp\n\n\n")
    with pytest.raises(TableIOError, match=_named(path) + " has a header but no rows"):
        read_table(path)


def test_blank_lines_between_rows_of_a_wider_file_are_skipped(tmp_path):
    # With several columns a row of blanks is written with its delimiters (",,"); a bare blank
    # line carries no fields and is spacing.
    content = "a,b\n1,x\n\n,\n3,z\n\n"
    frame = read_table(_write(tmp_path / "t.csv", content)).frame
    assert frame.to_dict("list") == {"a": ["1", "", "3"], "b": ["x", "", "z"]}


def test_csv_write_then_read_round_trips_text_cell_for_cell(tmp_path):
    frame = pd.DataFrame({"code": ["012", "", "7"], "note": ["a,b", "say \"hi\"", ""]},
                         dtype="str")
    path = write_table(frame, tmp_path / "out.csv")
    assert path == tmp_path / "out.csv"
    back = read_table(path).frame
    pd.testing.assert_frame_equal(back, frame)


def test_csv_write_uses_the_given_delimiter(tmp_path):
    frame = pd.DataFrame({"a": ["1,5", "2"], "b": ["x", "y"]}, dtype="str")
    path = write_table(frame, tmp_path / "out.csv", delimiter=";")
    assert path.read_text(encoding="utf-8") == "a;b\n1,5;x\n2;y\n"


# ---------------------------------------------------------------------------------- Parquet


def test_parquet_round_trip_keeps_types(tmp_path):
    frame = pd.DataFrame(
        {
            "trips": np.array([3, 1, 4], dtype="int64"),
            "count": pd.array([1, None, 3], dtype="Int64"),
            "temp": [2.5, np.nan, -18.25],
            "cargo": pd.array(["dairy", None, "frozen"], dtype="str"),
            "sealed": [True, False, True],
            "opened": pd.array([True, None, False], dtype="boolean"),
            "departed": pd.to_datetime(["2024-03-01 06:30", None, "2024-03-02 07:45"]),
        }
    )
    path = write_table(frame, tmp_path / "t.parquet")
    # The reference library sees the native Parquet types.
    schema = pq.read_schema(path)
    assert schema.field("trips").type == pa.int64()
    assert schema.field("temp").type == pa.float64()
    assert pa.types.is_string(schema.field("cargo").type) or pa.types.is_large_string(
        schema.field("cargo").type
    )
    assert schema.field("sealed").type == pa.bool_()
    assert pa.types.is_timestamp(schema.field("departed").type)

    table = read_table(path)
    assert table.format == "parquet"
    assert not table.is_text
    expected = frame.astype({"trips": "Int64", "sealed": "boolean"})
    pd.testing.assert_frame_equal(table.frame, expected)


def test_parquet_integers_are_read_as_nullable_int64(tmp_path):
    path = tmp_path / "ints.parquet"
    pq.write_table(pa.table({"n": pa.array([1, None, 3], type=pa.int32())}), path)
    column = read_table(path).frame["n"]
    assert column.dtype == pd.Int64Dtype()
    assert column.isna().tolist() == [False, True, False]


# ----------------------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    ("name", "content", "error", "problem", "remedy"),
    [
        ("empty.csv", b"", TableIOError, "is empty", "give a file with a header and rows"),
        ("blank.csv", " \n\t\n  \n", TableIOError, "is empty",
         "give a file with a header and rows"),
        ("header.csv", "a,b,c\n", TableIOError, "has a header but no rows",
         "give a file with data"),
        ("table.txt", "a,b\n1,2\n", TableIOError, "unknown extension '.txt'",
         "use .csv or .parquet"),
        ("latin1.csv", b"cargo,n\ncaf\xe9,1\n", TableIOError,
         # "cargo,n\n" is 8 bytes and "caf" 3 more: the bad byte is at offset 11.
         r"not valid UTF-8 \(byte 0xe9 at offset 11\)", "re-save it as UTF-8"),
        ("dups.csv", "a,b,a,c,b\n1,2,3,4,5\n", DataError, "duplicate column names: a, b",
         "rename them"),
        ("unnamed.csv", "a,,c\n1,2,3\n", DataError, "column 2 has no name", "give it one"),
        ("bad.parquet", b"PAR1 this is not a parquet file", TableIOError,
         # The reason in brackets is pyarrow's first sentence, kept short.
         r"not a readable Parquet file \(Parquet magic bytes not found in footer\)",
         "check that it is a complete Parquet file or export it again"),
    ],
    ids=["empty", "whitespace", "header-only", "extension", "undecodable", "duplicates",
         "unnamed", "corrupt-parquet"],
)
def test_read_errors_name_the_file_and_say_what_to_do(tmp_path, name, content, error, problem,
                                                      remedy):
    path = _write(tmp_path / name, content)
    with pytest.raises(error, match=_named(path)) as info:
        read_table(path)
    message = str(info.value)
    assert re.search(problem, message), message
    assert re.search(remedy, message), message


def test_missing_file(tmp_path):
    path = tmp_path / "nowhere" / "trips.csv"
    with pytest.raises(TableIOError, match=_named(path) + ": no such file; check the path"):
        read_table(path)


def test_option_name_is_used_in_messages(tmp_path):
    path = tmp_path / "absent.csv"
    with pytest.raises(TableIOError, match=r"^--truth '"):
        read_table(path, option="--truth")


def test_directory_is_not_a_file(tmp_path):
    path = tmp_path / "folder.csv"
    path.mkdir()
    with pytest.raises(TableIOError, match=_named(path) + " is not a file"):
        read_table(path)


def test_directory_message_says_what_to_do(tmp_path):
    path = tmp_path / "folder.csv"
    path.mkdir()
    with pytest.raises(
        TableIOError, match=r"is not a file; give the path of a \.csv or \.parquet file, not a "
                            r"folder$"
    ):
        read_table(path)


def test_corrupt_parquet_is_a_table_io_error(tmp_path):
    path = _write(tmp_path / "bad.parquet", b"PAR1 this is not a parquet file")
    with pytest.raises(TableIOError, match=_named(path) + " is not a readable Parquet file"):
        read_table(path)


def test_duplicate_parquet_column_names(tmp_path):
    path = tmp_path / "dups.parquet"
    pq.write_table(pa.Table.from_arrays([pa.array([1]), pa.array([2])], names=["x", "x"]), path)
    with pytest.raises(DataError, match=_named(path) + " has duplicate column names: x; rename"):
        read_table(path)


def test_undecodable_byte_after_bom_is_named_at_its_file_offset(tmp_path):
    # BOM (3 bytes) + "cargo,n\n" (8) + "caf" (3): the bad byte 0xe9 is at file offset 14.
    content = b"\xef\xbb\xbfcargo,n\ncaf\xe9,1\n"
    assert content[14] == 0xE9
    path = _write(tmp_path / "bom.csv", content)
    with pytest.raises(TableIOError, match=r"byte 0xe9 at offset 14\)"):
        read_table(path)


def test_duplicate_parquet_names_are_refused_before_any_data_is_read(tmp_path, monkeypatch):
    path = tmp_path / "dups.parquet"
    pq.write_table(pa.Table.from_arrays([pa.array([1]), pa.array([2]), pa.array([3])],
                                        names=["x", "y", "x"]), path)

    def _no_reading(self, *args, **kwargs):
        raise AssertionError("data read before the header check")

    monkeypatch.setattr(pq.ParquetFile, "read", _no_reading)
    with pytest.raises(DataError, match=r"duplicate column names: x; rename them"):
        read_table(path)


def test_table_format_by_extension():
    assert table_format("a.CSV") == "csv"
    assert table_format("a.parquet") == "parquet"
    assert table_format("a.pq") == "parquet"
    with pytest.raises(TableIOError, match=r"--plan 'noext': unknown extension '\(none\)'"):
        table_format("noext", option="--plan")


# ------------------------------------------------------------------------------ fingerprint


def test_fingerprint_is_sha256_of_the_bytes(tmp_path):
    # Reference: hashlib.sha256 over the whole content. 2.5 MiB spans several read blocks.
    payload = b"a,b\n" + b"1,2\n" * (5 * 2**18 // 4 * 2)
    path = _write(tmp_path / "t.csv", payload)
    expected = hashlib.sha256(payload).hexdigest()
    assert file_fingerprint(path) == expected
    assert read_table(path).fingerprint == expected


def test_fingerprint_differs_for_different_content(tmp_path):
    first = read_table(_write(tmp_path / "a.csv", "a,b\n1,2\n")).fingerprint
    second = read_table(_write(tmp_path / "b.csv", "a,b\n1,3\n")).fingerprint
    assert first != second
    assert first == hashlib.sha256(b"a,b\n1,2\n").hexdigest()


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_read_table_never_modifies_the_input(tmp_path, suffix):
    path = tmp_path / f"t{suffix}"
    frame = pd.DataFrame({"a": ["1", "", "n/a"], "b": ["x", "y", "z"]}, dtype="str")
    write_table(frame, path)
    # A fixed old mtime: any rewrite, however fast, would change it.
    os.utime(path, ns=(1_000_000_000, 1_000_000_000))
    before = path.read_bytes()
    read_table(path)
    assert path.stat().st_mtime_ns == 1_000_000_000
    assert path.read_bytes() == before
    assert _listing(tmp_path) == [path.name]


# ---------------------------------------------------------------------------- atomic writes


def _failing_to_csv(self, handle, *args, **kwargs):
    handle.write("a,b\n1,")  # part of the output is on disk when the failure strikes
    handle.flush()
    raise OSError("disk full")


def _failing_write_parquet(table, where, *args, **kwargs):
    Path(where).write_bytes(b"PAR1 half")
    raise OSError("disk full")


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
@pytest.mark.parametrize("existing", [False, True], ids=["new", "existing"])
def test_failed_write_leaves_no_output_and_no_temp_file(tmp_path, monkeypatch, suffix, existing):
    target = tmp_path / f"out{suffix}"
    if existing:
        target.write_bytes(b"previous content")
        os.utime(target, ns=(1_000_000_000, 1_000_000_000))
    monkeypatch.setattr(pd.DataFrame, "to_csv", _failing_to_csv)
    monkeypatch.setattr(pq, "write_table", _failing_write_parquet)
    frame = pd.DataFrame({"a": ["1", "2"], "b": ["x", "y"]}, dtype="str")
    with pytest.raises(OSError, match="disk full"):
        write_table(frame, target)
    if existing:
        assert target.read_bytes() == b"previous content"
        assert target.stat().st_mtime_ns == 1_000_000_000
        assert _listing(tmp_path) == [target.name]
    else:
        assert not target.exists()
        assert _listing(tmp_path) == []


def test_successful_write_replaces_the_target_and_leaves_no_temp_file(tmp_path):
    target = _write(tmp_path / "out.csv", "old\n")
    write_table(pd.DataFrame({"a": ["1"]}, dtype="str"), target)
    assert target.read_text(encoding="utf-8") == "a\n1\n"
    assert _listing(tmp_path) == ["out.csv"]


def test_atomic_path_removes_temp_file_on_error(tmp_path):
    target = tmp_path / "plan.json"
    seen = []
    with pytest.raises(RuntimeError, match="stop"), atomic_path(target) as tmp:
        seen.append(tmp)
        assert tmp.parent == tmp_path
        assert tmp.name.endswith(".part")
        tmp.write_text("{}")
        raise RuntimeError("stop")
    assert not seen[0].exists()
    assert not target.exists()


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_writing_into_a_missing_folder_names_it(tmp_path, suffix):
    folder = tmp_path / "no" / "such"
    with pytest.raises(TableIOError, match=re.escape(f"folder '{folder}' does not exist")):
        write_table(pd.DataFrame({"a": [1]}), folder / f"out{suffix}")
    assert not (tmp_path / "no").exists()


def test_writing_with_unknown_extension_is_refused(tmp_path):
    with pytest.raises(TableIOError, match=r"`out` '.*out\.xlsx': unknown extension '\.xlsx'"):
        write_table(pd.DataFrame({"a": [1]}), tmp_path / "out.xlsx")
    assert _listing(tmp_path) == []


def test_a_delimiter_inside_quoted_cells_does_not_fool_the_sniffer(tmp_path):
    # Found by hypothesis (tests/test_streaming.py): ';' inside quoted cells of a comma file.
    # Reference: Python's csv module reads the file back as pandas wrote it.
    frame = pd.DataFrame([("", "", ';"'), ("", "", ";,")], columns=["a", "b b", 'c"'])
    path = tmp_path / "cells.csv"
    frame.to_csv(path, index=False, sep=",", lineterminator="\n")
    table = read_table(path)
    assert table.delimiter == ","
    assert list(table.frame.columns) == ["a", "b b", 'c"']
    assert table.frame['c"'].tolist() == [';"', ";,"]
