"""Build a :class:`RiskSample` for a linear book from plain arrays."""

from __future__ import annotations

from typing import Sequence

import numpy as np

from .base import RiskSample, linear_revalue

__all__ = ["linear_sample"]


def linear_sample(
    returns: np.ndarray,
    values: np.ndarray,
    *,
    history: np.ndarray | None = None,
    dates: np.ndarray | None = None,
    portfolios: Sequence[str] | None = None,
    instruments: Sequence[str] | None = None,
) -> RiskSample:
    """A :class:`RiskSample` whose book is linear in the instrument values.

    Parameters
    ----------
    returns : (T, N) array
        Daily log returns of the estimation window (last row = as_of).
    values : (P, N) array
        Base-currency holdings.
    history : (H, N) array, optional
        Longer history ending with ``returns``; defaults to ``returns``.
    dates : (T,) datetime64[D], optional
        Defaults to consecutive business days ending 2024-12-31.
    portfolios, instruments : sequences of str, optional
        Defaults ``P1..`` and ``I1..``.

    Returns
    -------
    RiskSample
        ``pnl = values @ expm1(returns).T`` and ``revalue = linear_revalue(values)``.
    """
    returns = np.atleast_2d(np.asarray(returns, dtype=float))
    values = np.atleast_2d(np.asarray(values, dtype=float))
    T, N = returns.shape
    if values.shape[1] != N:
        raise ValueError(f"values have {values.shape[1]} instruments, returns {N}")
    history = returns if history is None else np.asarray(history, dtype=float)
    if history.shape[0] < T or not np.array_equal(history[-T:], returns, equal_nan=True):
        raise ValueError("history must end with the window returns")
    if dates is None:
        dates = np.busday_offset(np.datetime64("2024-12-31"), np.arange(-T + 1, 1), roll="backward")
    portfolios = tuple(portfolios) if portfolios is not None else tuple(f"P{i + 1}" for i in range(len(values)))
    instruments = tuple(instruments) if instruments is not None else tuple(f"I{i + 1}" for i in range(N))
    revalue = linear_revalue(values)
    return RiskSample(
        as_of=np.datetime64(dates[-1], "D"),
        portfolios=portfolios,
        instruments=instruments,
        dates=np.asarray(dates, dtype="datetime64[D]"),
        returns=returns,
        history=history,
        values=values,
        pnl=revalue(returns, 1),
        revalue=revalue,
    )
