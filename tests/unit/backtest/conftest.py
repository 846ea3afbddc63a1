"""Seeded P&L series shared by the backtest tests."""

from __future__ import annotations

import numpy as np
import pytest


def simulate_garch_t(
    seed: int, n_portfolios: int, n_days: int, *, omega: float = 0.01, alpha: float = 0.10, beta: float = 0.89,
    dof: float = 4.0, scale: float = 1.0
) -> np.ndarray:
    """(P, T) P&L from a GARCH(1,1) with unit-variance Student-t innovations.

    Volatility clusters and the tails are fat: the textbook case where a normal
    VaR with a long equal-weight window fails. The loop is over days of a test
    fixture only.
    """
    rng = np.random.default_rng(seed)
    e = rng.standard_t(dof, (n_days, n_portfolios)) * np.sqrt((dof - 2) / dof)
    s2 = np.full(n_portfolios, omega / (1 - alpha - beta))
    x = np.empty((n_days, n_portfolios))
    for t in range(n_days):
        x[t] = np.sqrt(s2) * e[t]
        s2 = omega + alpha * x[t] ** 2 + beta * s2
    return scale * x.T


@pytest.fixture(scope="session")
def garch_t():
    """The :func:`simulate_garch_t` simulator, as a fixture."""
    return simulate_garch_t
