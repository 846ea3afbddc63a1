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
    "Book",
    "make_book",
    "linear_book",
    "implied_vol_instrument",
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


@dataclass(frozen=True)
class Book:
    """Today's holdings of every portfolio, ready for revaluation.

    ``instruments`` are the risk-factor columns (held linear instruments,
    option underlyings and the FX series options need); ``values`` are the
    first-order base-currency exposures to them (plain values for a linear
    book); ``extra`` holds the optional RiskSample fields of option books.
    """

    as_of: np.datetime64
    portfolios: tuple[str, ...]
    instruments: tuple[str, ...]
    values: np.ndarray
    revalue: Any
    extra: Mapping[str, Any]
    exposures: pa.Table
    sensitivities: pa.Table | None
    sources: Mapping[str, tuple[str, int]]

    def locate(self, instrument: str) -> tuple[str, int | None]:
        """Positions file and row that make the book depend on ``instrument``."""
        file, row = self.sources.get(instrument, (self.exposures.column("positions_file")[0].as_py(), None))
        return file, row


def option_instruments(instruments: pa.Table) -> set[str]:
    """Instruments described as options (asset_class option, or option terms filled)."""
    names = instruments.column("instrument").to_pylist()
    flags = [a == "option" for a in instruments.column("asset_class").to_pylist()]
    if "underlying" in instruments.column_names:
        flags = [f or bool(u) for f, u in zip(flags, instruments.column("underlying").to_pylist())]
    return {n for n, f in zip(names, flags) if f}


def make_book(as_of: np.datetime64, positions: pa.Table, source_file: str, market: MarketData,
              instruments: pa.Table, *, base_currency: str, instruments_file: str) -> Book:
    """Build the book of one as_of from its positions file.

    Linear instruments are valued at the base-currency close of as_of;
    options (rows of instruments.csv with option terms) are priced and
    revalued in full by :mod:`tailtrace.options`.
    """
    as_of = np.datetime64(as_of, "D")
    options = option_instruments(instruments)
    held = set(positions.column("instrument").to_pylist())
    if not held & options:
        return linear_book(as_of, positions, source_file, market)
    return _option_book(as_of, positions, source_file, market, instruments, options, base_currency=base_currency,
                        instruments_file=instruments_file)


def linear_book(as_of: np.datetime64, positions: pa.Table, source_file: str, market: MarketData) -> Book:
    """The book of a positions table holding linear instruments only."""
    as_of = np.datetime64(as_of, "D")
    holdings = Holdings.from_table(as_of, positions, source_file)
    exp = exposures_table(holdings, market)
    portfolios, names, values, _ = holdings_from_exposures(exp, as_of)
    sources = {i: (source_file, int(r)) for i, r in zip(exp.column("instrument").to_pylist(),
                                                        exp.column("positions_row").to_pylist())}
    return Book(as_of, portfolios, names, values, linear_revalue(values), {}, exp, None, sources)


def _option_book(as_of, positions, source_file, market, instruments, options, *, base_currency, instruments_file):
    import pandas as pd

    from .options import build_book, validate_option_rows
    from .reference import fx_instrument

    instr_df = instruments.drop_columns(["row"]).to_pandas()
    specs = validate_option_rows(instr_df, file=instruments_file, known_instruments=market.instruments, as_of=as_of)
    pos_df = positions.select(["portfolio", "instrument", "quantity"]).to_pandas()
    rows = dict(zip(positions.column("instrument").to_pylist(), positions.column("row").to_pylist()))
    row_of = dict(zip(zip(positions.column("portfolio").to_pylist(), positions.column("instrument").to_pylist()),
                      positions.column("row").to_pylist()))
    ccy = dict(zip(instruments.column("instrument").to_pylist(), instruments.column("currency").to_pylist()))
    held_options = [i for i in dict.fromkeys(pos_df["instrument"]) if i in options]
    under = dict(zip(specs.instrument, specs.underlying))
    linear = sorted(set(pos_df["instrument"]) - options)
    needed = set(linear)
    sources = {i: (source_file, int(rows[i])) for i in linear}
    for o in held_options:
        needed.add(under[o])
        sources.setdefault(under[o], (source_file, int(rows[o])))
        if ccy[o] != base_currency:
            needed.add(fx_instrument(ccy[o]))
            sources.setdefault(fx_instrument(ccy[o]), (source_file, int(rows[o])))
    vol_series = {}  # underlying -> its implied-vol series IV.<underlying>, when a price file has one
    for o in held_options:
        iv = implied_vol_instrument(under[o])
        if iv in market.instruments:
            vol_series[under[o]] = iv
            needed.add(iv)
            sources.setdefault(iv, (source_file, int(rows[o])))
    columns = tuple(sorted(needed))
    missing = [c for c in columns if c not in market.instruments]
    if missing:
        file, row = sources[missing[0]]
        raise InputError("no price series for this instrument in any price file", file=file, row=row,
                         column="instrument", value=missing[0])
    r = int(np.searchsorted(market.dates, as_of))
    prices = {c: float(market.base[r, market.column(c)]) for c in columns}
    portfolios = tuple(sorted(set(pos_df["portfolio"])))
    book = build_book(pos_df, instr_df, prices, as_of=as_of, columns=columns, base_currency=base_currency,
                      options=specs, portfolios=portfolios, positions_file=source_file,
                      instruments_file=instruments_file, prices_file="prices/")
    sens = book.sensitivities.copy()
    sens.insert(0, "as_of", pd.Timestamp(as_of).date())
    sens_table = pa.Table.from_pandas(sens, preserve_index=False)
    qty = sens["quantity"].to_numpy(dtype=float)
    value = sens["value"].to_numpy(dtype=float)
    exp = pa.table({
        "as_of": pa.array(np.full(len(sens), as_of), type=pa.date32()),
        "portfolio": pa.array(sens["portfolio"].astype(str).tolist(), type=pa.string()),
        "instrument": pa.array(sens["instrument"].astype(str).tolist(), type=pa.string()),
        "quantity": pa.array(qty),
        "price_base": pa.array(np.divide(value, qty, out=np.zeros_like(value), where=qty != 0)),
        "value_base": pa.array(value),
        "positions_file": pa.array([source_file] * len(sens), type=pa.string()),
        "positions_row": pa.array([int(row_of[(p, i)]) for p, i in zip(sens["portfolio"], sens["instrument"])],
                                  type=pa.int64()),
    }, schema=EXPOSURE_SCHEMA)
    extra = {"exposures": book.exposures, "gammas": book.gammas, "thetas": book.thetas}
    revalue = book.revalue
    if vol_series:
        pairs = [(columns.index(u), columns.index(iv), prices[iv]) for u, iv in sorted(vol_series.items())]
        revalue = _with_vol_series(book.revalue, pairs)
    return Book(as_of, book.portfolios, book.instruments, book.exposures, revalue, extra, exp, sens_table,
                sources)


def _with_vol_series(revalue: Any, pairs: list[tuple[int, int, float]]) -> Any:
    """Full revaluation in which each IV.<underlying> column moves the implied vols too.

    The scenario's log change r of the vol series becomes the absolute vol
    shock ``level * (exp(r) - 1)`` of every option on that underlying (the
    series' move in vol points, today's level times its relative change);
    explicit ``vol_shocks`` add to it.
    """
    def revalue_with_vols(log_shocks: np.ndarray, horizon_days: int = 1, vol_shocks: np.ndarray | None = None):
        shocks = np.zeros_like(log_shocks) if vol_shocks is None else np.array(vol_shocks, dtype=float)
        for under_col, iv_col, level in pairs:
            shocks[:, under_col] += level * np.expm1(log_shocks[:, iv_col])
        return revalue(log_shocks, horizon_days, vol_shocks=shocks)

    return revalue_with_vols


def implied_vol_instrument(underlying: str) -> str:
    """Name of the optional implied-vol series of options on ``underlying``."""
    return f"IV.{underlying}"


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


def build_sample(market: MarketData, book: "Book", window: int) -> RiskSample:
    """The estimation sample of one as_of (window returns, holdings, P&L).

    Raises
    ------
    InputError
        A risk factor of the book has missing returns inside the window (too
        little history, or a gap longer than the fill limit).
    """
    as_of = np.datetime64(book.as_of, "D")
    idx = _window_index(market, as_of, window)
    cols = [market.column(i) for i in book.instruments]
    returns = market.log_returns[np.ix_(idx, cols)]
    bad = ~np.isfinite(returns)
    if bad.any():
        j = int(np.flatnonzero(bad.any(axis=0))[0])
        t = int(idx[np.flatnonzero(bad[:, j])[0]])
        first_bad = market.dates[t]
        file, row = book.locate(book.instruments[j])
        raise InputError(
            f"instrument {book.instruments[j]} lacks prices inside the {window}-day window ending {as_of} "
            f"(first missing return {first_bad}); {_missing_cause(market, cols[j], t)}",
            file=file, row=row, column="instrument", value=book.instruments[j])
    end = int(idx[-1]) + 1
    block = market.log_returns[:end, cols]  # one copy of the book's columns, checked once
    finite = np.isfinite(block).all(axis=1)
    start_hist = int(np.flatnonzero(finite)[0])
    complete = finite[start_hist:]
    history = block[start_hist:] if complete.all() else block[start_hist:][complete]
    history_dates = market.dates[start_hist:end][complete]
    return RiskSample(
        as_of=as_of,
        portfolios=book.portfolios,
        instruments=book.instruments,
        dates=market.dates[idx],
        returns=returns,
        history=history,
        values=book.values,
        pnl=book.revalue(returns, 1),
        revalue=book.revalue,
        history_dates=history_dates,
        **book.extra,
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
