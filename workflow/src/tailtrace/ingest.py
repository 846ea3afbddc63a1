"""Ingest one price file: validate, sort, and report data-quality issues."""

from __future__ import annotations

import datetime as _dt
from pathlib import Path
from typing import Iterable

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .csvread import (
    EARLIEST_DATE,
    CsvTable,
    parse_dates,
    parse_numbers,
    read_csv_strict,
    read_plain_typed,
    sorted_codes,
    text_codes,
)
from .errors import InputError

__all__ = ["PRICE_COLUMNS", "QUALITY_SCHEMA", "read_price_file", "quality_checks", "empty_quality", "runs_of_true"]

PRICE_COLUMNS = ("date", "instrument", "close")

QUALITY_SCHEMA = pa.schema(
    [
        ("file", pa.string()),
        ("instrument", pa.string()),
        ("check", pa.string()),
        ("first_date", pa.date32()),
        ("last_date", pa.date32()),
        ("n", pa.int64()),
        ("detail", pa.string()),
        ("severity", pa.string()),
    ]
)


def empty_quality() -> pa.Table:
    return QUALITY_SCHEMA.empty_table()


def _check_duplicates(table: CsvTable, order: np.ndarray, codes: np.ndarray, names: np.ndarray, date: np.ndarray,
                      close: np.ndarray) -> None:
    same = (codes[order][1:] == codes[order][:-1]) & (date[order][1:] == date[order][:-1])
    if not same.any():
        return
    j = int(np.flatnonzero(same)[0])
    first, second = sorted((int(order[j]), int(order[j + 1])))
    rows = (table.row_of(first), table.row_of(second))
    if close[first] == close[second]:
        msg = f"duplicate row: same date and instrument as row {rows[0]}"
    else:
        msg = f"conflicting prices for the same date and instrument (rows {rows[0]} and {rows[1]}: {close[first]} vs {close[second]})"
    raise InputError(msg, file=table.path, row=rows[1], column="date", value=f"{date[second]} {names[codes[second]]}")


_PRICE_TYPES = {"date": pa.date32(), "instrument": pa.string(), "close": pa.float64()}


def _read_plain_prices(path: str | Path) -> tuple[CsvTable, np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """The typed fast path for a plain file whose values all pass; None sends it to the strict reader."""
    typed = read_plain_typed(path, _PRICE_TYPES)
    if typed is None:
        return None
    date = typed.column("date").to_numpy().astype("datetime64[D]")
    close = typed.column("close").to_numpy()
    names, codes = sorted_codes(typed.column("instrument"))
    padded = any(not n or n != n.strip() for n in names)
    if padded or not (np.isfinite(close).all() and (close > 0).all() and (date >= EARLIEST_DATE).all()):
        return None  # the strict path reports the offending row
    return CsvTable(path=str(path), columns={}, extra_columns=()), date, names, codes, close


def read_price_file(
    path: str | Path, known_instruments: Iterable[str], *, today: np.datetime64 | None = None
) -> tuple[pa.Table, list[str]]:
    """Read and validate a price file.

    Parameters
    ----------
    path : CSV with columns ``date`` (YYYY-MM-DD), ``instrument``, ``close`` (> 0)
    known_instruments : instruments listed in instruments.csv
    today : dates after it are rejected (default: the machine's date)

    Returns
    -------
    table : pyarrow.Table sorted by instrument then date
    extra_columns : names of ignored unknown columns

    Raises
    ------
    InputError
        Bad date, non-numeric or non-positive close, unknown instrument,
        future date, duplicate or conflicting rows.
    """
    plain = _read_plain_prices(path)
    if plain is not None:
        table, date, names, codes, close = plain
    else:
        table = read_csv_strict(path, PRICE_COLUMNS)
        date = parse_dates(table, "date")
        names, codes = text_codes(table, "instrument")  # checks once per instrument, not per row
        close = parse_numbers(table, "close", positive=True)
    known = set(known_instruments)
    unknown = np.array([n not in known for n in names], dtype=bool)[codes]
    if unknown.any():
        i = int(np.flatnonzero(unknown)[0])
        raise InputError("unknown instrument: not listed in instruments.csv", file=table.path, row=table.row_of(i), column="instrument", value=names[codes[i]])
    limit = np.datetime64(today if today is not None else _dt.date.today(), "D")
    future = date > limit
    if future.any():
        i = int(np.flatnonzero(future)[0])
        raise InputError(f"date lies in the future (after {limit})", file=table.path, row=table.row_of(i), column="date", value=str(date[i]))
    order = np.lexsort((date, codes))  # codes follow the sorted names
    _check_duplicates(table, order, codes, names, date, close)
    out = pa.table(
        {
            "date": pa.array(date[order], type=pa.date32()),
            "instrument": pc.take(pa.array(names.tolist(), type=pa.string()), pa.array(codes[order])),
            "close": pa.array(close[order], type=pa.float64()),
        }
    )
    return out, list(table.extra_columns)


def runs_of_true(flags: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (inclusive) indices of runs of True in a 1-D array."""
    padded = np.concatenate(([False], flags, [False])).astype(np.int8)
    edges = np.diff(padded)
    return np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1


def quality_checks(prices: pa.Table, file: str, *, stale_days: int, extra_columns: Iterable[str] = ()) -> pa.Table:
    """Gaps against the file's own calendar, stale prices, ignored columns.

    Parameters
    ----------
    prices : table from :func:`read_price_file` (sorted by instrument, date)
    file : name recorded in the rows
    stale_days : a close repeated on at least this many consecutive rows is stale

    Returns
    -------
    pyarrow.Table with :data:`QUALITY_SCHEMA`

    Notes
    -----
    A gap is a run of dates on which the file has prices for other
    instruments but not for this one, between the instrument's first and last
    date. Nothing is filled here; the returns step applies the documented
    missing-data policy.
    """
    date = prices.column("date").to_numpy().astype("datetime64[D]")
    close = prices.column("close").to_numpy()
    rows: list[dict] = []
    names, inst_idx = sorted_codes(prices.column("instrument"))
    calendar, date_idx = np.unique(date, return_inverse=True)
    present = np.zeros((len(names), len(calendar)), dtype=bool)
    present[inst_idx, date_idx] = True
    first = present.argmax(axis=1)
    last = len(calendar) - 1 - present[:, ::-1].argmax(axis=1)
    span = (np.arange(len(calendar)) >= first[:, None]) & (np.arange(len(calendar)) <= last[:, None])
    missing = span & ~present
    for k in np.flatnonzero(missing.any(axis=1)):
        for s, e in zip(*runs_of_true(missing[k])):
            rows.append(dict(instrument=names[k], check="gap", first_date=calendar[s], last_date=calendar[e], n=int(e - s + 1),
                             detail=f"no price on {e - s + 1} date(s) the file has for other instruments", severity="warning"))
    repeat = np.zeros(len(close), dtype=bool)
    repeat[1:] = (close[1:] == close[:-1]) & (inst_idx[1:] == inst_idx[:-1])
    for s, e in zip(*runs_of_true(repeat)):
        length = e - s + 2  # a run of k repeats spans k + 1 rows
        if length >= stale_days:
            rows.append(dict(instrument=names[inst_idx[s]], check="stale", first_date=date[s - 1], last_date=date[e], n=int(length),
                             detail=f"close {close[s]} unchanged on {length} consecutive rows", severity="warning"))
    for col in extra_columns:
        rows.append(dict(instrument=None, check="extra_column", first_date=None, last_date=None, n=0,
                         detail=f"unknown column '{col}' ignored", severity="warning"))
    if not rows:
        return empty_quality()
    for r in rows:
        r["file"] = file
        for key in ("first_date", "last_date"):
            r[key] = None if r[key] is None else r[key].astype("datetime64[D]").item()
    return pa.Table.from_pylist(rows, schema=QUALITY_SCHEMA)
