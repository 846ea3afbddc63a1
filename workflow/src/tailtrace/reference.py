"""Reference data: the instrument list and the positions files."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Iterable

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .csvread import CsvTable, parse_numbers, read_csv_strict, require_text
from .errors import InputError

__all__ = [
    "ASSET_CLASSES",
    "INSTRUMENT_COLUMNS",
    "OPTION_COLUMNS",
    "OPTION_REQUIRED",
    "POSITION_COLUMNS",
    "fx_instrument",
    "read_instruments",
    "read_positions",
]

INSTRUMENT_COLUMNS = ("instrument", "asset_class", "currency")
OPTION_COLUMNS = ("underlying", "option_type", "strike", "expiry", "implied_vol", "rate", "dividend_yield", "multiplier")
POSITION_COLUMNS = ("portfolio", "instrument", "quantity")
# Fields an option row cannot do without (tailtrace.options checks their values).
OPTION_REQUIRED = ("underlying", "option_type", "strike", "expiry", "implied_vol")
ASSET_CLASSES = (
    "equity",
    "equity_index",
    "equity_index_future",
    "commodity",
    "commodity_future",
    "bond",
    "bond_future",
    "fx",
    "cash",
    "option",
    "implied_vol",
)
_CCY = re.compile(r"^[A-Z]{3}$")


def fx_instrument(currency: str) -> str:
    """Name of the FX series giving the base-currency price of one unit of ``currency``."""
    return f"FX.{currency}"


def _first_duplicate(keys: np.ndarray) -> tuple[int, int] | None:
    order = np.argsort(keys, kind="stable")
    same = keys[order][1:] == keys[order][:-1]
    if not same.any():
        return None
    j = int(np.flatnonzero(same)[0])
    return int(order[j]), int(order[j + 1])


def _check_option_rows(table: CsvTable, asset: np.ndarray) -> None:
    """Rows of asset_class 'option' need every field of OPTION_REQUIRED filled."""
    is_option = asset == "option"
    if not is_option.any():
        return
    first = int(np.flatnonzero(is_option)[0])
    for column in OPTION_REQUIRED:
        if column not in table.columns:
            raise InputError(f"an option row needs column '{column}' (and {', '.join(OPTION_REQUIRED)}); the header lacks it",
                             file=table.path, row=table.row_of(first), column=column)
        empty = np.asarray(pc.equal(pc.utf8_length(table.columns[column]), 0).to_numpy(zero_copy_only=False), dtype=bool)
        bad = is_option & empty
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"empty {column}; an option needs {', '.join(OPTION_REQUIRED)}", file=table.path,
                             row=table.row_of(i), column=column, value=table.columns["instrument"][i].as_py())


def read_instruments(path: str | Path) -> pa.Table:
    """Read and validate instruments.csv.

    Returns
    -------
    pyarrow.Table with ``instrument, asset_class, currency`` and any option
    columns present (as text; the options module validates their values).

    Raises
    ------
    InputError
        A duplicate instrument, an unknown asset_class, a currency that is not
        three capitals, an option row lacking a column or value of
        :data:`OPTION_REQUIRED`.
    """
    table = read_csv_strict(path, INSTRUMENT_COLUMNS, OPTION_COLUMNS)
    inst = require_text(table, "instrument")
    asset = require_text(table, "asset_class")
    ccy = require_text(table, "currency")
    dup = _first_duplicate(inst)
    if dup:
        raise InputError(f"instrument listed twice (rows {table.row_of(dup[0])} and {table.row_of(dup[1])})",
                         file=table.path, row=table.row_of(dup[1]), column="instrument", value=inst[dup[1]])
    bad_asset = np.array([a not in ASSET_CLASSES for a in asset])
    if bad_asset.any():
        i = int(np.flatnonzero(bad_asset)[0])
        raise InputError(f"unknown asset_class; expected one of {', '.join(ASSET_CLASSES)}", file=table.path,
                         row=table.row_of(i), column="asset_class", value=asset[i])
    bad_ccy = np.array([not _CCY.match(c) for c in ccy])
    if bad_ccy.any():
        i = int(np.flatnonzero(bad_ccy)[0])
        raise InputError("currency must be a three-letter ISO 4217 code", file=table.path, row=table.row_of(i),
                         column="currency", value=ccy[i])
    _check_option_rows(table, asset)
    cols = {c: table.columns[c] for c in table.columns}
    cols["row"] = pa.array(table.row_of(np.arange(table.n_rows)), type=pa.int64())
    return pa.table(cols)


def read_positions(path: str | Path, known_instruments: Iterable[str]) -> pa.Table:
    """Read and validate a positions file.

    Returns
    -------
    pyarrow.Table ``portfolio, instrument, quantity, row`` (row = file line).

    Raises
    ------
    InputError
        Unknown instrument, non-numeric quantity, a (portfolio, instrument)
        pair listed twice, or a portfolio whose quantities are all zero.
    """
    table = read_csv_strict(path, POSITION_COLUMNS)
    portfolio = require_text(table, "portfolio")
    inst = require_text(table, "instrument")
    known = set(known_instruments)
    unknown = np.array([i not in known for i in inst])
    if unknown.any():
        i = int(np.flatnonzero(unknown)[0])
        raise InputError("position in an unknown instrument: not listed in instruments.csv", file=table.path,
                         row=table.row_of(i), column="instrument", value=inst[i])
    qty = parse_numbers(table, "quantity")
    keys = np.array([f"{p}\x1f{i}" for p, i in zip(portfolio, inst)], dtype=object)
    dup = _first_duplicate(keys)
    if dup:
        raise InputError(f"position listed twice for this portfolio (rows {table.row_of(dup[0])} and {table.row_of(dup[1])})",
                         file=table.path, row=table.row_of(dup[1]), column="instrument", value=inst[dup[1]])
    names, idx = np.unique(portfolio, return_inverse=True)
    gross = np.bincount(idx, weights=np.abs(qty), minlength=len(names))
    if (gross == 0).any():
        k = int(np.flatnonzero(gross == 0)[0])
        i = int(np.flatnonzero(idx == k)[0])
        raise InputError("portfolio has no positions (every quantity is zero)", file=table.path, row=table.row_of(i),
                         column="quantity", value=names[k])
    return pa.table(
        {
            "portfolio": pa.array(portfolio.astype(str)),
            "instrument": pa.array(inst.astype(str)),
            "quantity": pa.array(qty, type=pa.float64()),
            "row": pa.array(table.row_of(np.arange(table.n_rows)), type=pa.int64()),
        }
    )
