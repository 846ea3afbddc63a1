"""Shared fixtures for the stress tests: a small invented universe and linear books."""

from __future__ import annotations

import numpy as np
import pytest

from tailtrace.estimators.base import linear_revalue
from tailtrace.stress.instruments import InstrumentMeta


@pytest.fixture
def meta() -> InstrumentMeta:
    # base EUR; two EUR equities, a USD equity, a USD bond, a commodity, the USD rate
    return InstrumentMeta.from_columns(
        ["EQ.A", "EQ.B", "EQ.US", "BOND.US", "CMD.X", "FX.USD"],
        ["equity", "equity", "equity", "bond", "commodity", "fx"],
        ["EUR", "EUR", "USD", "USD", "USD", "EUR"],
        "EUR",
    )


@pytest.fixture
def values() -> np.ndarray:
    # long-only, long/short, an FX-only book
    return np.array(
        [
            [1000.0, 500.0, 800.0, 400.0, 300.0, 0.0],
            [600.0, -700.0, 0.0, 200.0, -100.0, 0.0],
            [0.0, 0.0, 0.0, 0.0, 0.0, -250.0],
        ]
    )


@pytest.fixture
def portfolios() -> tuple[str, ...]:
    return ("long_only", "long_short", "fx_only")


@pytest.fixture
def revalue(values):
    return linear_revalue(values)


def _business_days(n: int, start: str = "2018-01-02") -> np.ndarray:
    """n weekdays from start (no holidays), as datetime64[D]."""
    return np.busday_offset(np.datetime64(start, "D"), np.arange(n), roll="forward")


@pytest.fixture
def business_days():
    return _business_days


@pytest.fixture
def history() -> tuple[np.ndarray, np.ndarray]:
    """900 days of fat-tailed daily log returns for the six instruments, seeded."""
    rng = np.random.default_rng(20240611)
    r = rng.standard_t(df=4, size=(900, 6)) * 0.01
    return r, _business_days(900)
