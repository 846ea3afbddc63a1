"""Which price rows an estimation window reads (window_usage)."""

from __future__ import annotations

import numpy as np
import pytest

from tailtrace.errors import TailtraceError
from tailtrace.market import MarketData
from tailtrace.usage import window_usage


def _market(observed: np.ndarray) -> MarketData:
    dates = np.arange(np.datetime64("2024-03-01"), np.datetime64("2024-03-01") + observed.shape[0])
    return MarketData(dates=dates, instruments=tuple(f"S{j}" for j in range(observed.shape[1])), local=None,
                      base=None, observed=observed, log_returns=None)


def _brute_force(observed: np.ndarray, end: int, window: int, j: int) -> tuple[int, int, int, int]:
    """Loop version of the rule: prices of rows end-window .. end, carried forward from the last real close."""
    first_price_row = end - window
    first = max(r for r in range(first_price_row + 1) if observed[r, j])
    last = max(r for r in range(end + 1) if observed[r, j])
    n_rows = sum(bool(observed[r, j]) for r in range(first, last + 1))
    n_filled = sum(not observed[r, j] for r in range(first_price_row, end + 1))
    return first, last, n_rows, n_filled


def test_window_usage_matches_a_loop_over_rows():
    rng = np.random.default_rng(11)
    observed = rng.random((40, 3)) > 0.25
    observed[0] = True  # every series starts observed
    market = _market(observed)
    window = 8
    pairs = [(d, j) for d in range(window + 1, 40) for j in range(3)]
    as_of = market.dates[[d for d, _ in pairs]]
    got = window_usage(market, as_of, window, np.array([j for _, j in pairs]))
    for k, (d, j) in enumerate(pairs):
        first, last, n_rows, n_filled = _brute_force(observed, d, window, j)
        assert got["first_date"][k] == market.dates[first]
        assert got["last_date"][k] == market.dates[last]
        assert (got["n_rows"][k], got["n_filled"][k]) == (n_rows, n_filled)
        assert got["window_first"][k] == market.dates[d - window + 1] and got["window_last"][k] == market.dates[d]


def test_window_longer_than_history_is_an_error():
    market = _market(np.ones((10, 1), dtype=bool))
    with pytest.raises(TailtraceError, match="window_days=10 is longer than the history"):
        window_usage(market, market.dates[[9]], 10, np.array([0]))
