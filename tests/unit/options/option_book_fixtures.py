"""Builders shared by the option tests: a small multi-currency book."""

from __future__ import annotations

import numpy as np
import pandas as pd

from tailtrace.estimators.base import RiskSample

AS_OF = "2024-12-31"
BASE = "USD"
COLUMNS = ("EQ.EU", "EQ.US", "FUT.EU", "FX.EUR")
# Base-currency closes at as_of; FX.EUR = USD per EUR.
PRICES = {"EQ.EU": 80.0 * 1.04, "EQ.US": 50.0, "FUT.EU": 4800.0 * 1.04, "FX.EUR": 1.04}


def instruments_table(**overrides_by_instrument) -> pd.DataFrame:
    """Instruments with one option of each model; overrides edit option rows."""
    rows = [
        {"instrument": "EQ.EU", "asset_class": "equity", "currency": "EUR"},
        {"instrument": "EQ.US", "asset_class": "equity", "currency": "USD"},
        {"instrument": "FUT.EU", "asset_class": "equity_index_future", "currency": "EUR"},
        {"instrument": "FX.EUR", "asset_class": "fx", "currency": "USD"},
        {"instrument": "PUT.EU", "asset_class": "option", "currency": "EUR", "underlying": "EQ.EU",
         "option_type": "put", "strike": 72.0, "expiry": "2025-06-30", "implied_vol": 0.24, "rate": 0.025,
         "dividend_yield": 0.02, "multiplier": 1.0},
        {"instrument": "CALL.US", "asset_class": "option", "currency": "USD", "underlying": "EQ.US",
         "option_type": "call", "strike": 55.0, "expiry": "2025-03-21", "implied_vol": 0.30, "rate": 0.045,
         "dividend_yield": 0.0, "multiplier": 100.0},
        {"instrument": "FCALL.EU", "asset_class": "option", "currency": "EUR", "underlying": "FUT.EU",
         "option_type": "call", "strike": 5000.0, "expiry": "2025-09-19", "implied_vol": 0.18, "rate": 0.025,
         "dividend_yield": None, "multiplier": 10.0},
        {"instrument": "FXPUT.EUR", "asset_class": "option", "currency": "USD", "underlying": "FX.EUR",
         "option_type": "put", "strike": 1.00, "expiry": "2025-06-30", "implied_vol": 0.08, "rate": 0.045,
         "dividend_yield": 0.025, "multiplier": 100000.0},
    ]
    for row in rows:
        row.update(overrides_by_instrument.get(row["instrument"], {}))
    return pd.DataFrame(rows)


def positions_table() -> pd.DataFrame:
    return pd.DataFrame(
        [
            ("hedged", "EQ.EU", 10000.0),
            ("hedged", "PUT.EU", 10000.0),
            ("hedged", "FXPUT.EUR", 5.0),
            ("mixed", "EQ.US", 2000.0),
            ("mixed", "CALL.US", -15.0),
            ("mixed", "FCALL.EU", 4.0),
            ("mixed", "EQ.EU", 500.0),
            ("linear", "EQ.US", 1000.0),
            ("linear", "EQ.EU", -300.0),
        ],
        columns=["portfolio", "instrument", "quantity"],
    )


def sample_from_book(book, returns: np.ndarray, as_of: str = AS_OF) -> RiskSample:
    """RiskSample the way the scenario step is told to build it."""
    t = returns.shape[0]
    dates = np.datetime64(as_of, "D") - np.arange(t)[::-1]
    return RiskSample(
        as_of=np.datetime64(as_of, "D"), portfolios=book.portfolios, instruments=book.instruments,
        dates=dates, returns=returns, history=returns, **book.risk_sample_fields(returns),
    )


def correlated_returns(cov: np.ndarray, n: int, seed: int) -> np.ndarray:
    """Returns whose window mean is 0 and sample covariance (ddof=1) equals ``cov`` exactly."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n, cov.shape[0]))
    x -= x.mean(axis=0)
    white = x @ np.linalg.inv(np.linalg.cholesky(np.atleast_2d(np.cov(x, rowvar=False)))).T
    return white @ np.linalg.cholesky(cov).T
