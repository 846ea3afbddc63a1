"""Strict CSV reading: every problem is reported with file, row and column.

Rows are numbered as lines of the file, the header being row 1. Parsing is
columnar (pyarrow); the slow path that pins down a bad row runs only when
something is already wrong.
"""

from __future__ import annotations

import io
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from .errors import DataQualityWarning, InputError

__all__ = ["CsvTable", "read_csv_strict", "parse_dates", "parse_numbers", "require_text", "sorted_codes", "text_codes"]

_NUMBER = r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$"
_ISO_DATE = r"^\d{4}-\d{2}-\d{2}$"


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


def _decode(path: Path, raw: bytes) -> str:
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise InputError(
            "file is not valid UTF-8 text; save it as UTF-8", file=str(path), row=line, value=raw[exc.start : exc.start + 4]
        ) from None
    return text.lstrip("\ufeff")


def _locate_bad_row(path: Path, text: str, n_fields: int) -> None:
    for number, line in enumerate(text.splitlines(), start=1):
        if number == 1:
            continue
        fields = line.count(",") + 1 if line else 0
        if fields != n_fields:
            what = "blank line" if not line.strip() else f"{fields} fields where the header has {n_fields}"
            raise InputError(f"malformed row: {what}", file=str(path), row=number, value=line[:80])


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
        Empty file, non-UTF-8 bytes, missing columns, ragged rows, too few rows.
    """
    path = Path(path)
    name = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", file=name) from None
    text = _decode(path, raw)
    if not text.strip():
        raise InputError("file is empty; expected a header row and data rows", file=name, row=1)
    header_line = text.splitlines()[0]
    header = [h.strip() for h in header_line.split(",")]
    missing = [c for c in required if c not in header]
    if missing:
        hint = ""
        if len(header) == 1 and any(d in header_line for d in ";\t|"):
            hint = "; the file seems to use another delimiter than a comma"
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
        warnings.warn(f"{name}: ignoring unknown column(s) {', '.join(extra)}", DataQualityWarning, stacklevel=2)
    try:
        table = pacsv.read_csv(
            io.BytesIO(text.encode("utf-8")),
            read_options=pacsv.ReadOptions(use_threads=False),
            parse_options=pacsv.ParseOptions(newlines_in_values=False, ignore_empty_lines=False),
            convert_options=pacsv.ConvertOptions(
                column_types={h: pa.string() for h in header}, strings_can_be_null=False, quoted_strings_can_be_null=False
            ),
        )
    except pa.ArrowInvalid as exc:
        _locate_bad_row(path, text, len(header))
        raise InputError(f"cannot parse CSV: {exc}", file=name) from None
    table = table.rename_columns(header)
    if table.num_rows < min_rows:
        raise InputError(f"no data rows below the header (need at least {min_rows})", file=name, row=2)
    keep = [c for c in header if c in required or c in optional]
    cols = {c: pc.utf8_trim_whitespace(table.column(c).combine_chunks()) for c in keep}
    return CsvTable(path=name, columns=cols, extra_columns=extra)


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
    valid = np.asarray(pc.is_valid(parsed).to_numpy(zero_copy_only=False), dtype=bool)
    _first_bad(table, column, ~(shaped & valid)[codes], "not a valid ISO 8601 date; expected YYYY-MM-DD")
    return parsed.to_numpy(zero_copy_only=False).astype("datetime64[D]")[codes]


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


