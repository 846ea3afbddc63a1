"""Strict CSV reading: shape checks, number and date parsing, error locations."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from tailtrace.csvread import parse_dates, parse_numbers, read_csv_strict, require_text
from tailtrace.errors import DataQualityWarning, InputError

COLS = ("date", "instrument", "close")


def write(tmp_path, data: bytes | str, name: str = "prices.csv"):
    path = tmp_path / name
    path.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
    return path


def read(path, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataQualityWarning)
        return read_csv_strict(path, COLS, **kw)


GOOD = "date,instrument,close\n2024-01-02,EQ.A,101.5\n2024-01-03,EQ.A,102\n"


@pytest.mark.parametrize(
    "variant",
    [
        pytest.param(GOOD, id="plain"),
        pytest.param("\ufeff" + GOOD, id="utf8-bom"),
        pytest.param(GOOD.replace("\n", "\r\n"), id="crlf"),
        pytest.param(GOOD.replace("\n", "\r"), id="cr-only"),
        pytest.param(GOOD + "\n\n  \n", id="trailing-blank-lines"),
        pytest.param(GOOD.rstrip("\n"), id="no-final-newline"),
        pytest.param('"date","instrument","close"\n2024-01-02,"EQ.A",101.5\n2024-01-03,EQ.A,"102"\n', id="quoted"),
        pytest.param("date , instrument,close \n 2024-01-02 ,EQ.A , 101.5\n2024-01-03,EQ.A,102\n", id="spaces"),
        pytest.param("close,date,instrument\n101.5,2024-01-02,EQ.A\n102,2024-01-03,EQ.A\n", id="column-order"),
    ],
)
def test_accepted_layouts_give_the_same_table(tmp_path, variant):
    table = read(write(tmp_path, variant))
    assert table.n_rows == 2
    assert parse_dates(table, "date").astype(str).tolist() == ["2024-01-02", "2024-01-03"]
    assert require_text(table, "instrument").tolist() == ["EQ.A", "EQ.A"]
    assert parse_numbers(table, "close").tolist() == [101.5, 102.0]
    assert table.extra_columns == ()


def test_row_of_counts_file_lines_with_header_as_line_one(tmp_path):
    table = read(write(tmp_path, GOOD))
    assert table.row_of(0) == 2
    np.testing.assert_array_equal(table.row_of(np.arange(2)), [2, 3])


def test_unknown_column_warns_and_is_dropped(tmp_path):
    path = write(tmp_path, "date,instrument,close,source\n2024-01-02,EQ.A,1.5,vendor\n")
    with pytest.warns(DataQualityWarning, match="ignoring unknown column.*'source'"):
        table = read_csv_strict(path, COLS)
    assert table.extra_columns == ("source",)
    assert set(table.columns) == set(COLS)


def test_unknown_column_is_an_error_when_not_allowed(tmp_path):
    path = write(tmp_path, "date,instrument,close,source\n2024-01-02,EQ.A,1.5,vendor\n")
    with pytest.raises(InputError, match=r"prices\.csv, row 1, column 'source': unknown column"):
        read_csv_strict(path, COLS, allow_extra=False)


def test_optional_columns_are_kept(tmp_path):
    path = write(tmp_path, "date,instrument,close,note\n2024-01-02,EQ.A,1.5,x\n")
    table = read_csv_strict(path, COLS, optional=("note",))
    assert require_text(table, "note").tolist() == ["x"]


@pytest.mark.parametrize(
    "data, match",
    [
        pytest.param(b"", r"row 1, column 'date': file is empty", id="empty"),
        pytest.param(b"\n \n", r"row 1, column 'date': file is empty", id="only-blank-lines"),
        pytest.param(b"\xef\xbb\xbf", r"row 1, column 'date': file is empty", id="only-bom"),
        pytest.param(b"date,instrument,close\n", r"row 2, column 'date': no data rows", id="header-only"),
        pytest.param(b"date,close\n2024-01-02,1\n", r"row 1, column 'instrument': missing required column", id="missing-column"),
        pytest.param(b"Date,Instrument,Close\n2024-01-02,A,1\n", r"row 1, column 'date': .*column names are lower case", id="capitalised"),
        pytest.param(b"date;instrument;close\n2024-01-02;A;1\n", r"row 1, column 'date': .*another delimiter", id="semicolons"),
        pytest.param(b"date\tinstrument\tclose\n2024-01-02\tA\t1\n", r"row 1, column 'date': .*another delimiter", id="tabs"),
        pytest.param(b"date,instrument,close,close\n2024-01-02,A,1,2\n", r"row 1, column 'close': duplicate column", id="duplicate-header"),
        pytest.param(b'date,"instrument,close\n2024-01-02,A,1\n', r"row 1, column 'date': malformed header", id="header-open-quote"),
        pytest.param(b"date,instrument,close\n2024-01-02,A\xe9,1\n", r"row 2, column 'instrument': file is not valid UTF-8", id="latin1-byte"),
        pytest.param(b"date,instrument,close\n2024-01-02,A,1\n2024-01-03,B,\xff\n", r"row 3, column 'close': file is not valid UTF-8", id="bad-byte-row3"),
        pytest.param(b"date,instrument,close\r\n2024-01-02,A,1\r\n\x80,B,1\r\n", r"row 3, column 'date': file is not valid UTF-8", id="bad-byte-crlf"),
        pytest.param(b"date,instrument,close\n2024-01-02,A,1\n\n2024-01-03,A,2\n", r"row 3, column 'date': blank line", id="blank-line"),
        pytest.param(b"date,instrument,close\n2024-01-02,A\n", r"row 2, column 'close': 2 fields where the header has 3", id="too-few-fields"),
        pytest.param(b"date,instrument,close\n2024-01-02,A,1,234.5\n", r"row 2, column 'close': 4 fields .*thousands separator", id="too-many-fields"),
        pytest.param(b'date,instrument,close\n2024-01-02,A,"1.5\n2024-01-03,A,2\n', r"row 2, column 'close': unbalanced double quote", id="open-quote"),
    ],
)
def test_shape_errors_name_file_row_and_column(tmp_path, data, match):
    with pytest.raises(InputError, match=r"file .*prices\.csv, " + match) as info:
        read(write(tmp_path, data))
    assert info.value.file.endswith("prices.csv")
    assert info.value.row is not None and info.value.column is not None


def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match=r"nothere\.csv: file not found"):
        read_csv_strict(tmp_path / "nothere.csv", COLS)


def test_min_rows(tmp_path):
    with pytest.raises(InputError, match=r"row 2, column 'date': no data rows below the header \(need at least 3\)"):
        read_csv_strict(write(tmp_path, GOOD), COLS, min_rows=3)


@pytest.mark.parametrize(
    "text, expected",
    [("1", 1.0), ("-2.5", -2.5), ("+3.", 3.0), (".25", 0.25), ("1e3", 1000.0), ("1.5E-2", 0.015), ("007", 7.0)],
)
def test_plain_numbers_are_accepted(tmp_path, text, expected):
    table = read(write(tmp_path, f"date,instrument,close\n2024-01-02,A,{text}\n"))
    assert parse_numbers(table, "close")[0] == expected


@pytest.mark.parametrize(
    "text, match",
    [
        ("nan", "not a plain decimal number"),
        ("NaN", "not a plain decimal number"),
        ("inf", "not a plain decimal number"),
        ("-Infinity", "not a plain decimal number"),
        ('"1,234.5"', "not a plain decimal number"),
        ('"101,5"', "not a plain decimal number"),
        ("1 234.5", "not a plain decimal number"),
        ("1_000", "not a plain decimal number"),
        ("0x10", "not a plain decimal number"),
        ("12abc", "not a plain decimal number"),
        ("€5", "not a plain decimal number"),
        ("", "not a plain decimal number"),
        ("1e999", "number out of range; expected a finite value"),
    ],
)
def test_bad_numbers_name_row_column_and_value(tmp_path, text, match):
    table = read(write(tmp_path, f"date,instrument,close\n2024-01-02,A,1\n2024-01-03,A,{text}\n"))
    with pytest.raises(InputError, match=rf"prices\.csv, row 3, column 'close': {match}") as info:
        parse_numbers(table, "close")
    assert info.value.value == text.strip('"')


@pytest.mark.parametrize("text", ["0", "-1.5", "0.0", "1e-999"])
def test_positive_numbers(tmp_path, text):
    table = read(write(tmp_path, f"date,instrument,close\n2024-01-02,A,{text}\n"))
    with pytest.raises(InputError, match=r"row 2, column 'close': must be greater than zero"):
        parse_numbers(table, "close", positive=True)


@pytest.mark.parametrize("text", ["02/01/2024", "2024/01/02", "2024-1-2", "20240102", "2024-02-30", "2023-02-29", "2024-04-31", "2024-13-01",
                                  "2024-01-02T00:00", "2 Jan 2024", ""])
def test_bad_dates(tmp_path, text):
    table = read(write(tmp_path, f"date,instrument,close\n2024-01-02,A,1\n{text},A,1\n"))
    with pytest.raises(InputError, match=r"prices\.csv, row 3, column 'date': not a valid ISO 8601 date; expected YYYY-MM-DD"):
        parse_dates(table, "date")


def test_leap_day_is_a_date(tmp_path):
    table = read(write(tmp_path, "date,instrument,close\n2024-02-29,A,1\n"))
    assert parse_dates(table, "date")[0] == np.datetime64("2024-02-29")


def test_empty_text_is_rejected(tmp_path):
    table = read(write(tmp_path, 'date,instrument,close\n2024-01-02,A,1\n2024-01-03,  ,1\n2024-01-04,"",1\n'))
    with pytest.raises(InputError, match=r"row 3, column 'instrument': empty value; expected text"):
        require_text(table, "instrument")
