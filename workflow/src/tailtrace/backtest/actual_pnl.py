"""Read an optional file of actual daily P&L to backtest against.

Format (``pnl_actual.csv``): a header with the columns ``date``,
``portfolio``, ``pnl`` (any order, extra columns ignored with a warning),
then one row per (date, portfolio): ISO date ``YYYY-MM-DD``, portfolio
name, P&L in base currency (profit positive).
"""

from __future__ import annotations

import csv
import datetime as dt
import math
import re
import warnings
from pathlib import Path
from typing import Sequence

import numpy as np

from ..errors import DataQualityWarning, InputError

__all__ = ["ACTUAL_PNL_COLUMNS", "read_actual_pnl"]

ACTUAL_PNL_COLUMNS = ("date", "portfolio", "pnl")
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


def read_actual_pnl(path: str | Path, portfolios: Sequence[str], dates: Sequence[object]) -> np.ndarray:
    """Load actual P&L for the given portfolios and backtest dates.

    Parameters
    ----------
    path : str or Path
        The CSV file.
    portfolios : sequence of str, length P
    dates : sequence of dates, length D
        Backtest dates (anything ``numpy.datetime64`` accepts).

    Returns
    -------
    (P, D) float array

    Raises
    ------
    InputError
        Missing columns, a bad date or number (with row and column), a
        repeated (date, portfolio), or a backtest day without a value.

    Notes
    -----
    Rows for other dates are ignored; rows for unknown portfolios are
    ignored with a :class:`~tailtrace.errors.DataQualityWarning`.
    """
    path = Path(path)
    names = [str(p) for p in portfolios]
    p_index = {p: i for i, p in enumerate(names)}
    days = np.asarray(dates).astype("datetime64[D]")
    d_index = {d.item(): i for i, d in enumerate(days)}
    out = np.full((len(names), days.size), np.nan)
    unknown: set[str] = set()
    with path.open(newline="", encoding="utf-8") as fh:
        reader = csv.reader(fh)
        header = next(reader, None)
        if header is None:
            raise InputError("the file is empty; expected a header line", file=str(path))
        header = [h.strip() for h in header]
        missing = [c for c in ACTUAL_PNL_COLUMNS if c not in header]
        if missing:
            raise InputError(
                f"missing column(s) {missing}; the header must hold {list(ACTUAL_PNL_COLUMNS)}", file=str(path), row=1
            )
        extra = [c for c in header if c not in ACTUAL_PNL_COLUMNS]
        if extra:
            warnings.warn(f"{path}: extra column(s) {extra} ignored", DataQualityWarning, stacklevel=2)
        col = {c: header.index(c) for c in ACTUAL_PNL_COLUMNS}
        for line, fields in enumerate(reader, start=2):
            if not fields or all(not f.strip() for f in fields):
                continue
            if len(fields) != len(header):
                raise InputError(f"{len(fields)} fields, the header has {len(header)}", file=str(path), row=line)
            raw_date = fields[col["date"]].strip()
            if not _ISO_DATE.match(raw_date):
                raise InputError("date must be YYYY-MM-DD", file=str(path), row=line, column="date", value=raw_date)
            try:
                day = dt.date.fromisoformat(raw_date)
            except ValueError:
                raise InputError(
                    "not a calendar date", file=str(path), row=line, column="date", value=raw_date
                ) from None
            name = fields[col["portfolio"]].strip()
            if not name:
                raise InputError("empty portfolio name", file=str(path), row=line, column="portfolio")
            raw_pnl = fields[col["pnl"]].strip()
            try:
                value = float(raw_pnl)
            except ValueError:
                raise InputError("P&L is not a number", file=str(path), row=line, column="pnl", value=raw_pnl) from None
            if not math.isfinite(value):
                raise InputError("P&L must be finite", file=str(path), row=line, column="pnl", value=raw_pnl)
            if name not in p_index:
                unknown.add(name)
                continue
            d_i = d_index.get(day)
            if d_i is None:
                continue
            p_i = p_index[name]
            if not np.isnan(out[p_i, d_i]):
                raise InputError(
                    f"second P&L for portfolio {name!r} on {raw_date}",
                    file=str(path),
                    row=line,
                    column="pnl",
                    value=raw_pnl,
                )
            out[p_i, d_i] = value
    if unknown:
        warnings.warn(
            f"{path}: rows for unknown portfolio(s) {sorted(unknown)} ignored", DataQualityWarning, stacklevel=2
        )
    gaps = np.argwhere(np.isnan(out))
    if gaps.size:
        p_i, d_i = gaps[0]
        raise InputError(
            f"no actual P&L for {len(gaps)} (portfolio, backtest day) pairs, first for portfolio "
            f"{names[p_i]!r} on {days[d_i]}",
            file=str(path),
        )
    return out
