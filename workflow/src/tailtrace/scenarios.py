"""Today's book under historical returns: as_of dates, exposures, samples."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .errors import ConfigError, InputError
from .estimators.base import RiskSample, linear_revalue
from .market import MarketData

__all__ = [
    "Holdings",
    "resolve_as_of",
    "last_common_date",
    "exposures_table",
    "build_sample",
    "pnl_table",
    "holdings_from_exposures",
]

EXPOSURE_SCHEMA = pa.schema(
    [
        ("as_of", pa.date32()),
        ("portfolio", pa.string()),
        ("instrument", pa.string()),
        ("quantity", pa.float64()),
        ("price_base", pa.float64()),
        ("value_base", pa.float64()),
        ("positions_file", pa.string()),
        ("positions_row", pa.int64()),
    ]
)


@dataclass(frozen=True)
class Holdings:
    """Positions of one as_of: a (portfolio × instrument) quantity matrix."""

    as_of: np.datetime64
    portfolios: tuple[str, ...]
    instruments: tuple[str, ...]
    quantity: np.ndarray  # (P, N)
    source_file: str
    source_rows: np.ndarray  # (P, N) file line of each position, 0 where none

    @classmethod
    def from_table(cls, as_of: np.datetime64, table: pa.Table, source_file: str) -> "Holdings":
        port = np.asarray(table.column("portfolio").to_pylist(), dtype=object)
        inst = np.asarray(table.column("instrument").to_pylist(), dtype=object)
        portfolios, pi = np.unique(port, return_inverse=True)
        instruments, ii = np.unique(inst, return_inverse=True)
        qty = np.zeros((len(portfolios), len(instruments)))
        rows = np.zeros_like(qty, dtype=np.int64)
        qty[pi, ii] = table.column("quantity").to_numpy()
        rows[pi, ii] = table.column("row").to_numpy()
        return cls(np.datetime64(as_of, "D"), tuple(map(str, portfolios)), tuple(map(str, instruments)), qty, source_file, rows)


def last_common_date(market: MarketData, instruments: Sequence[str]) -> np.datetime64:
    """Latest date on which every listed instrument has an observed close."""
    cols = [market.column(i) for i in instruments]
    common = market.observed[:, cols].all(axis=1)
    if not common.any():
        raise InputError("no date on which all held instruments have a price", file="prices/", column="date")
    return market.dates[np.flatnonzero(common)[-1]]


def resolve_as_of(spec: Any, market: MarketData, held: Sequence[str]) -> list[np.datetime64]:
    """Turn the config's ``as_of`` into a sorted list of calendar dates.

    ``spec`` is null (last common price date), a date, a list of dates, or a
    mapping ``{start, end}`` meaning every calendar date in that range.
    """
    if spec is None or spec == "latest":
        return [last_common_date(market, held)]
    if isinstance(spec, Mapping):
        start, end = np.datetime64(str(spec["start"]), "D"), np.datetime64(str(spec["end"]), "D")
        if end < start:
            raise ConfigError(f"as_of range ends ({end}) before it starts ({start})")
        chosen = market.dates[(market.dates >= start) & (market.dates <= end)]
        if chosen.size == 0:
            raise ConfigError(f"as_of range {start}..{end} contains no price date")
        return list(chosen)
    items = spec if isinstance(spec, (list, tuple)) else [spec]
    out = []
    for item in items:
        day = np.datetime64(str(item), "D")
        if day not in market.dates:
            raise ConfigError(f"as_of {day} is not a date of the price files (last date: {market.dates[-1]})")
        out.append(day)
    return sorted(set(out))


def _window_index(market: MarketData, as_of: np.datetime64, window: int) -> np.ndarray:
    end = int(np.searchsorted(market.dates, as_of, side="right"))  # rows up to and including as_of
    start = end - window
    if start < 1:  # row 0 has no return
        raise ConfigError(
            f"window_days={window} is larger than the history: only {end - 1} daily returns up to {as_of}"
        )
    return np.arange(start, end)


def exposures_table(holdings: Holdings, market: MarketData) -> pa.Table:
    """Quantity, base price and base value of every position at as_of."""
    row = int(np.searchsorted(market.dates, holdings.as_of))
    cols = [market.column(i) for i in holdings.instruments]
    price = market.base[row, cols]
    missing = np.isnan(price)
    if missing.any():
        j = int(np.flatnonzero(missing)[0])
        p = int(np.flatnonzero(holdings.quantity[:, j])[0])
        raise InputError(f"no price (or FX rate) on as_of {holdings.as_of} for this instrument", file=holdings.source_file,
                         row=int(holdings.source_rows[p, j]), column="instrument", value=holdings.instruments[j])
    held = holdings.source_rows > 0
    p_idx, n_idx = np.nonzero(held)
    values = holdings.quantity * price
    return pa.table(
        {
            "as_of": pa.array(np.full(len(p_idx), holdings.as_of), type=pa.date32()),
            "portfolio": pa.array([holdings.portfolios[p] for p in p_idx], type=pa.string()),
            "instrument": pa.array([holdings.instruments[n] for n in n_idx], type=pa.string()),
            "quantity": pa.array(holdings.quantity[p_idx, n_idx]),
            "price_base": pa.array(price[n_idx]),
            "value_base": pa.array(values[p_idx, n_idx]),
            "positions_file": pa.array([holdings.source_file] * len(p_idx), type=pa.string()),
            "positions_row": pa.array(holdings.source_rows[p_idx, n_idx]),
        },
        schema=EXPOSURE_SCHEMA,
    )


def holdings_from_exposures(exposures: pa.Table, as_of: np.datetime64) -> tuple[tuple[str, ...], tuple[str, ...], np.ndarray, pa.Table]:
    """Portfolios, instruments and the (P, N) value matrix of one as_of."""
    day = exposures.column("as_of").to_numpy().astype("datetime64[D]")
    part = exposures.filter(pa.array(day == np.datetime64(as_of, "D")))
    port = np.asarray(part.column("portfolio").to_pylist(), dtype=object)
    inst = np.asarray(part.column("instrument").to_pylist(), dtype=object)
    portfolios, pi = np.unique(port, return_inverse=True)
    instruments, ii = np.unique(inst, return_inverse=True)
    values = np.zeros((len(portfolios), len(instruments)))
    values[pi, ii] = part.column("value_base").to_numpy()
    return tuple(map(str, portfolios)), tuple(map(str, instruments)), values, part


def _missing_cause(market: MarketData, col: int, t: int) -> str:
    """Why the return on row ``t`` of column ``col`` is missing, as far as the data tells."""
    if market.base is None or market.local is None or market.observed is None:
        return "it has too little history or a gap longer than the fill limit"
    r = t if np.isnan(market.base[t, col]) else t - 1
    if not np.isnan(market.local[r, col]):
        return (f"its own close is there on {market.dates[r]} but the FX rate converting it to the base currency is "
                "missing (a gap longer than the fill limit, or the FX series starts later)")
    seen = np.flatnonzero(market.observed[:, col])
    if seen.size == 0 or seen[0] > r:
        first = market.dates[seen[0]] if seen.size else "never"
        return f"its first price is on {first}: too little history for the window"
    return f"no close on {market.dates[r]}: a gap longer than the fill limit (returns.max_fill_days)"


def build_sample(market: MarketData, exposures: pa.Table, as_of: np.datetime64, window: int) -> RiskSample:
    """The estimation sample of one as_of (window returns, holdings, P&L).

    Raises
    ------
    InputError
        A held instrument has missing returns inside the window (too little
        history, or a gap longer than the fill limit).
    """
    portfolios, instruments, values, part = holdings_from_exposures(exposures, as_of)
    idx = _window_index(market, np.datetime64(as_of, "D"), window)
    cols = [market.column(i) for i in instruments]
    returns = market.log_returns[np.ix_(idx, cols)]
    bad = ~np.isfinite(returns)
    if bad.any():
        j = int(np.flatnonzero(bad.any(axis=0))[0])
        t = int(idx[np.flatnonzero(bad[:, j])[0]])
        first_bad = market.dates[t]
        rows = part.filter(pc.equal(part.column("instrument"), instruments[j]))
        raise InputError(
            f"instrument lacks prices inside the {window}-day window ending {as_of} (first missing return {first_bad}); "
            f"{_missing_cause(market, cols[j], t)}",
            file=str(rows.column("positions_file")[0]), row=int(rows.column("positions_row")[0].as_py()),
            column="instrument", value=instruments[j])
    end = int(idx[-1]) + 1
    start_hist = int(np.flatnonzero(np.isfinite(market.log_returns[:end, cols]).all(axis=1))[0])
    history = market.log_returns[start_hist:end, cols]
    history = history[np.isfinite(history).all(axis=1)]
    revalue = linear_revalue(values)
    return RiskSample(
        as_of=np.datetime64(as_of, "D"),
        portfolios=portfolios,
        instruments=instruments,
        dates=market.dates[idx],
        returns=returns,
        history=history,
        values=values,
        pnl=revalue(returns, 1),
        revalue=revalue,
    )


def pnl_table(sample: RiskSample) -> pa.Table:
    """Long table of the 1-day scenario P&L: as_of, portfolio, date, pnl."""
    P, T = sample.pnl.shape
    return pa.table(
        {
            "as_of": pa.array(np.full(P * T, sample.as_of), type=pa.date32()),
            "portfolio": pa.array(np.repeat(np.array(sample.portfolios, dtype=object), T).tolist(), type=pa.string()),
            "date": pa.array(np.tile(sample.dates, P), type=pa.date32()),
            "pnl": pa.array(sample.pnl.reshape(-1)),
        }
    )
