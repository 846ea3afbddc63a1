"""Implied-vol series IV.<underlying> move option vols in historical scenarios."""

import numpy as np
import pyarrow as pa
import pytest

from tailtrace.market import build_market
from tailtrace.options import option_price
from tailtrace.scenarios import make_book


def _setup(with_iv: bool):
    dates = np.arange(np.datetime64("2024-01-01"), np.datetime64("2024-01-11"))
    rng = np.random.default_rng(3)
    spot = 100 * np.exp(np.cumsum(rng.normal(0, 0.01, len(dates))))
    vol = 0.20 * np.exp(np.cumsum(rng.normal(0, 0.05, len(dates))))
    rows = [("EQ.A", spot)] + ([("IV.EQ.A", vol)] if with_iv else [])
    d = np.concatenate([dates] * len(rows))
    inst = sum(([n] * len(dates) for n, _ in rows), [])
    close = np.concatenate([v for _, v in rows])
    prices = pa.table({"date": pa.array(d, pa.date32()), "instrument": inst, "close": close})
    names = ["EQ.A", "PUT.A"] + (["IV.EQ.A"] if with_iv else [])
    instruments = pa.table({
        "instrument": names, "asset_class": ["equity", "option"] + (["implied_vol"] if with_iv else []),
        "currency": ["EUR"] * len(names), "underlying": ["", "EQ.A"] + ([""] if with_iv else []),
        "option_type": ["", "put"] + ([""] if with_iv else []), "strike": ["", "100"] + ([""] if with_iv else []),
        "expiry": ["", "2024-07-01"] + ([""] if with_iv else []), "implied_vol": ["", "0.2"] + ([""] if with_iv else []),
        "rate": ["", "0.02"] + ([""] if with_iv else []), "dividend_yield": ["", "0"] + ([""] if with_iv else []),
        "multiplier": ["", "1"] + ([""] if with_iv else []), "row": list(range(2, 2 + len(names)))})
    market, _ = build_market([("p.csv", prices)], instruments, base_currency="EUR", max_fill_days=3)
    positions = pa.table({"portfolio": ["P"], "instrument": ["PUT.A"], "quantity": [10.0], "row": [2]})
    book = make_book(dates[-1], positions, "positions.csv", market, instruments, base_currency="EUR",
                     instruments_file="instruments.csv")
    return book, market, spot, vol


def test_vol_series_shocks_the_implied_vol_by_its_own_move():
    book, market, spot, vol = _setup(with_iv=True)
    assert book.instruments == ("EQ.A", "IV.EQ.A")
    shocks = np.array([[0.0, np.log(1.5)]])  # vol series up 50%, spot unchanged
    pnl = book.revalue(shocks, 1)[0, 0]
    tau0 = (np.datetime64("2024-07-01") - np.datetime64("2024-01-10")).astype(int) / 365
    tau1 = tau0 - 1.4 / 365  # one business day ages the option 7/5 calendar days
    before = option_price(spot[-1], 100.0, tau0, 0.2, 0.02, 0.0, False)
    after = option_price(spot[-1], 100.0, tau1, 0.2 + 0.5 * vol[-1], 0.02, 0.0, False)
    assert pnl == pytest.approx(10 * (after - before), rel=1e-9)


def test_without_a_vol_series_the_vol_is_held():
    book, *_ = _setup(with_iv=False)
    assert book.instruments == ("EQ.A",)
    assert book.revalue(np.zeros((1, 1)), 1)[0, 0] < 0  # only time decay
