"""Strict CSV reading: every problem is reported with file, row and column.

Rows are numbered as lines of the file, the header being row 1. Parsing is
columnar (pyarrow); the slow path that pins down a bad row runs only when
something is already wrong.
"""

from __future__ import annotations

import csv
import io
import re
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from .errors import DataQualityWarning, InputError

__all__ = ["CsvTable", "read_csv_strict", "read_plain_typed", "parse_dates", "parse_numbers", "require_text", "sorted_codes", "text_codes"]

_NUMBER = r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$"
_ISO_DATE = r"^\d{4}-\d{2}-\d{2}$"
EARLIEST_DATE = np.datetime64("1800-01-01")  # older years are typos (and beyond Python's date range at 0000)


@dataclass(frozen=True)
class CsvTable:
    """Columns of a CSV file as trimmed strings, with the file's name."""

    path: str
    columns: dict[str, pa.Array]
    extra_columns: tuple[str, ...]

    @property
    def n_rows(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def row_of(self, index: int | np.ndarray) -> int | np.ndarray:
        """File line of data row ``index`` (0-based): header is line 1."""
        return index + 2


_LINE_BREAK = re.compile(r"\r\n|\r|\n")


def _split_lines(text: str) -> list[str]:
    """Physical lines as pyarrow sees them (\\n, \\r\\n or \\r); trailing blank lines dropped."""
    lines = _LINE_BREAK.split(text)
    while lines and not lines[-1].strip():
        lines.pop()
    return lines


def _fields(line: str) -> list[str]:
    return next(csv.reader([line]), [])


def _decode(path: Path, raw: bytes) -> str:
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        before = raw[: exc.start]
        line = len(re.findall(rb"\r\n|\r|\n", before)) + 1
        line_start = max(before.rfind(b"\n"), before.rfind(b"\r")) + 1
        index = before[line_start:].count(b",")
        header = _fields(_LINE_BREAK.split(raw.decode("utf-8", "replace").lstrip("\ufeff"), maxsplit=1)[0])
        column = header[index].strip() if index < len(header) else None
        raise InputError(
            "file is not valid UTF-8 text; save it as UTF-8", file=str(path), row=line, column=column,
            value=raw[exc.start : exc.start + 4],
        ) from None
    return text.lstrip("\ufeff")


def _locate_bad_row(path: Path, lines: Sequence[str], header: Sequence[str]) -> None:
    """Find the first data line that breaks the table's shape and raise for it.

    Values may not contain line breaks, so each physical line must parse on
    its own into exactly one field per header column.
    """
    n_fields = len(header)
    for number, line in enumerate(lines[1:], start=2):
        if not line.strip():
            raise InputError("blank line inside the data; remove it", file=str(path), row=number, column=header[0])
        if line.count('"') % 2:
            raise InputError("unbalanced double quote (values may not span lines)", file=str(path), row=number,
                             column=header[min(line[: line.index('"')].count(","), n_fields - 1)], value=line[:80])
        try:
            fields = next(csv.reader([line], strict=True))
        except csv.Error as exc:
            raise InputError(f"malformed quoting: {exc}", file=str(path), row=number, column=header[0], value=line[:80]) from None
        count = f"{len(fields)} field{'' if len(fields) == 1 else 's'} where the header has {n_fields}"
        if len(fields) < n_fields:
            raise InputError(f"{count}; value missing", file=str(path), row=number, column=header[len(fields)],
                             value=line[:80])
        if len(fields) > n_fields:
            raise InputError(f"{count} (an unquoted comma, e.g. a thousands separator or a decimal comma?)",
                             file=str(path), row=number, column=header[-1], value=line[:80])


def _parse_body(body: str, slots: list[str]) -> pa.Table:
    return pacsv.read_csv(
        io.BytesIO(body.encode("utf-8")),
        read_options=pacsv.ReadOptions(use_threads=False, column_names=slots),
        parse_options=pacsv.ParseOptions(newlines_in_values=False, ignore_empty_lines=False),
        convert_options=pacsv.ConvertOptions(
            column_types={s: pa.string() for s in slots}, strings_can_be_null=False, quoted_strings_can_be_null=False
        ),
    )


def _fast_parse(text: str, header_line: str, slots: list[str], n_rows: int) -> pa.Table | None:
    """Parse a plain file (``\\n`` line ends, no blank lines) without splitting it in Python.

    Returns None whenever anything looks unusual, so that the careful path
    decides (and locates the bad line).
    """
    if "\r" in text:
        return None
    head, _, body = text.partition("\n")
    body = body.rstrip("\n")
    if head != header_line or not body or "\n\n" in body or body.count("\n") + 1 != n_rows:
        return None
    try:
        table = _parse_body(body + "\n", slots)
    except pa.ArrowInvalid:
        return None
    return table if table.num_rows == n_rows else None


def read_csv_strict(
    path: str | Path,
    required: Sequence[str],
    optional: Sequence[str] = (),
    *,
    allow_extra: bool = True,
    min_rows: int = 1,
) -> CsvTable:
    """Read a CSV file with every column as text, checking its shape.

    Parameters
    ----------
    path : path of the file
    required : columns that must be present
    optional : columns that may be present
    allow_extra : if True, unknown columns give a DataQualityWarning; else an error
    min_rows : minimum number of data rows

    Returns
    -------
    CsvTable

    Raises
    ------
    InputError
        Empty file, non-UTF-8 bytes, missing columns, ragged rows, blank or
        badly quoted lines, too few rows.

    Notes
    -----
    A UTF-8 byte-order mark, quoted header names, ``\\r\\n`` line ends and
    trailing blank lines are accepted.
    """
    path = Path(path)
    name = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", file=name) from None
    text = _decode(path, raw)
    lines = _split_lines(text)
    if not lines:
        raise InputError(f"file is empty; expected a header row {','.join(required)} and data rows", file=name, row=1,
                         column=required[0])
    header_line = lines[0]
    try:
        header = [h.strip() for h in next(csv.reader([header_line], strict=True))]
    except csv.Error as exc:
        raise InputError(f"malformed header: {exc}", file=name, row=1, column=required[0], value=header_line[:80]) from None
    missing = [c for c in required if c not in header]
    if missing:
        hint = ""
        if len(header) == 1 and any(d in header_line for d in ";\t|"):
            hint = "; the file seems to use another delimiter than a comma"
        elif any(h.lower() == missing[0] for h in header):
            hint = "; column names are lower case"
        raise InputError(
            f"missing required column(s) {', '.join(missing)}; header must contain {', '.join(required)}{hint}",
            file=name,
            row=1,
            column=missing[0],
            value=header_line[:80],
        )
    dupes = sorted({h for h in header if header.count(h) > 1})
    if dupes:
        raise InputError("duplicate column name in header", file=name, row=1, column=dupes[0])
    extra = tuple(h for h in header if h not in required and h not in optional)
    if extra and not allow_extra:
        raise InputError("unknown column", file=name, row=1, column=extra[0])
    if extra:
        warnings.warn(f"{name}: ignoring unknown column(s) {', '.join(map(repr, extra))}", DataQualityWarning, stacklevel=2)
    if len(lines) - 1 < min_rows:
        raise InputError(f"no data rows below the header (need at least {min_rows})", file=name, row=2, column=required[0])
    # Positional names: pyarrow would otherwise match column_types against the unstripped header.
    slots = [f"c{i}" for i in range(len(header))]
    table = _fast_parse(text, header_line, slots, len(lines) - 1)
    if table is None:  # the careful path: it also pins down the offending line
        try:
            table = _parse_body("\n".join(lines[1:]) + "\n", slots)
        except pa.ArrowInvalid as exc:
            _locate_bad_row(path, lines, header)
            raise InputError(f"cannot parse CSV: {exc}", file=name) from None
        if table.num_rows != len(lines) - 1 or any(not line.strip() for line in lines[1:]):
            _locate_bad_row(path, lines, header)
            raise InputError("cannot parse CSV: row count does not match the line count", file=name)
    table = table.rename_columns(header)
    keep = [c for c in header if c in required or c in optional]
    cols = {c: pc.utf8_trim_whitespace(table.column(c).combine_chunks()) for c in keep}
    return CsvTable(path=name, columns=cols, extra_columns=extra)


def read_plain_typed(path: str | Path, types: Mapping[str, pa.DataType]) -> pa.Table | None:
    """Typed, multi-threaded parse of a plain file, or None when anything looks unusual.

    Plain means: ``\n`` line ends, a header of exactly the columns of
    ``types`` (any order, unquoted), no blank lines, and every value
    parsing as its type. Anything else returns None and the caller takes
    :func:`read_csv_strict`, which accepts more and pins down bad rows. The
    caller still checks values pyarrow accepts but the strict path rejects
    (nan, inf, years before :data:`EARLIEST_DATE`, padded text).
    """
    try:
        raw = Path(path).read_bytes()
    except OSError:
        return None
    if b"\r" in raw:
        return None
    head, _, body = raw.partition(b"\n")
    header = head.decode("utf-8", "replace").split(",")
    if sorted(header) != sorted(types) or not body.strip(b"\n"):
        return None
    body = body.rstrip(b"\n")
    if b"\n\n" in body:
        return None
    try:
        table = pacsv.read_csv(
            pa.py_buffer(body + b"\n"),
            read_options=pacsv.ReadOptions(column_names=header, use_threads=True),
            parse_options=pacsv.ParseOptions(newlines_in_values=False, ignore_empty_lines=False),
            convert_options=pacsv.ConvertOptions(column_types=dict(types), null_values=[], strings_can_be_null=False,
                                                 quoted_strings_can_be_null=False),
        )
    except pa.ArrowInvalid:
        return None
    return table if table.num_rows == body.count(b"\n") + 1 else None


def _first_bad(table: CsvTable, column: str, bad: np.ndarray, message: str) -> None:
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(message, file=table.path, row=table.row_of(i), column=column, value=table.columns[column][i].as_py())


def require_text(table: CsvTable, column: str) -> np.ndarray:
    """Non-empty text values of a column as a numpy object array."""
    arr = table.columns[column]
    empty = np.asarray(pc.equal(pc.utf8_length(arr), 0).to_numpy(zero_copy_only=False), dtype=bool)
    _first_bad(table, column, empty, "empty value; expected text")
    return np.asarray(arr.to_numpy(zero_copy_only=False), dtype=object)


def _distinct(arr: pa.Array) -> tuple[pa.Array, np.ndarray]:
    """Distinct values (first-seen order) and each row's index into them."""
    encoded = pc.dictionary_encode(arr)
    return encoded.dictionary, encoded.indices.to_numpy(zero_copy_only=False)


def sorted_codes(values: pa.Array | pa.ChunkedArray) -> tuple[np.ndarray, np.ndarray]:
    """``np.unique(values, return_inverse=True)`` for a text column, without a Python object per row.

    Returns
    -------
    names : (K,) object array, sorted
    codes : (n,) int array, ``names[codes]`` is the column
    """
    arr = values.combine_chunks() if isinstance(values, pa.ChunkedArray) else values
    distinct, first_seen = _distinct(arr)
    names = np.asarray(distinct.to_pylist(), dtype=object)
    order = np.argsort(names)
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return names[order], rank[first_seen]


def text_codes(table: CsvTable, column: str) -> tuple[np.ndarray, np.ndarray]:
    """:func:`require_text` as sorted distinct names and row codes (see :func:`sorted_codes`).

    The check runs once per distinct value: a price file repeats each
    instrument thousands of times.
    """
    names, codes = sorted_codes(table.columns[column])
    empty = np.array([not n for n in names], dtype=bool)
    _first_bad(table, column, empty[codes], "empty value; expected text")
    return names, codes


def parse_dates(table: CsvTable, column: str) -> np.ndarray:
    """ISO 8601 dates (YYYY-MM-DD) as datetime64[D].

    Each distinct text is validated and parsed once (a price file repeats
    every date once per instrument).
    """
    values, codes = _distinct(table.columns[column])
    shaped = np.asarray(pc.match_substring_regex(values, _ISO_DATE).to_numpy(zero_copy_only=False), dtype=bool)
    parsed = pc.strptime(values, format="%Y-%m-%d", unit="s", error_is_null=True)
    # strptime rolls impossible days over (2024-02-30 -> 2024-03-01): require a round trip.
    same = pc.equal(pc.strftime(parsed, format="%Y-%m-%d"), values)
    valid = np.asarray(pc.fill_null(same, False).to_numpy(zero_copy_only=False), dtype=bool)
    _first_bad(table, column, ~(shaped & valid)[codes], "not a valid ISO 8601 date; expected YYYY-MM-DD")
    days = parsed.to_numpy(zero_copy_only=False).astype("datetime64[D]")
    _first_bad(table, column, (days < EARLIEST_DATE)[codes], f"date before {EARLIEST_DATE}; a typo in the year?")
    return days[codes]


def parse_numbers(table: CsvTable, column: str, *, positive: bool = False) -> np.ndarray:
    """Plain decimal numbers (no thousands separators, no nan/inf) as float64."""
    arr = table.columns[column]
    shaped = np.asarray(pc.match_substring_regex(arr, _NUMBER).to_numpy(zero_copy_only=False), dtype=bool)
    _first_bad(table, column, ~shaped, "not a plain decimal number (no thousands separators, nan or inf)")
    values = pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False)
    _first_bad(table, column, ~np.isfinite(values), "number out of range; expected a finite value")
    if positive:
        _first_bad(table, column, values <= 0, "must be greater than zero")
    return values


