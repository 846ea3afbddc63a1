"""Run a whole backtest: forecasts of every method against realised P&L."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import ConfigError
from .coverage import exceptions
from .rolling import rolling_forecasts

__all__ = ["BacktestResult", "run_backtest", "PNL_HYPOTHETICAL", "PNL_ACTUAL"]

PNL_HYPOTHETICAL = "hypothetical"
PNL_ACTUAL = "actual"


@dataclass(frozen=True)
class BacktestResult:
    """Forecasts of all methods over the backtest window.

    Attributes
    ----------
    portfolios, methods : tuple of str
    confidences : (C,) array
    dates : (D,) datetime64[D]
        Backtest days.
    pnl : (P, D) array
        Realised P&L each forecast is compared with.
    var, es : (M, P, C, D) arrays
        Forecasts, positive loss amounts.
    fallback : (M, P, C, D) bool array
        Where a method's documented fallback was used.
    window : int
        Estimation window of the forecasts.
    pnl_source : str
        "hypothetical" (today's positions held fixed) or "actual".
    diagnostics : dict of method -> dict
    """

    portfolios: tuple[str, ...]
    methods: tuple[str, ...]
    confidences: np.ndarray
    dates: np.ndarray
    pnl: np.ndarray
    var: np.ndarray
    es: np.ndarray
    fallback: np.ndarray
    window: int
    pnl_source: str = PNL_HYPOTHETICAL
    diagnostics: Mapping[str, Mapping[str, Any]] = field(default_factory=dict)

    @property
    def exceptions(self) -> np.ndarray:
        """(M, P, C, D) bool: realised loss beyond VaR."""
        return exceptions(self.pnl[None, :, None, :], self.var)


def _day_array(dates: Sequence[Any]) -> np.ndarray:
    d = np.asarray(dates).astype("datetime64[D]")
    if d.ndim != 1:
        raise ValueError("dates must be one-dimensional")
    if d.size > 1 and np.any(np.diff(d) <= np.timedelta64(0, "D")):
        i = int(np.flatnonzero(np.diff(d) <= np.timedelta64(0, "D"))[0])
        raise ValueError(f"dates must be strictly increasing; {d[i]} is followed by {d[i + 1]}")
    return d


def run_backtest(
    pnl_history: np.ndarray,
    dates: Sequence[Any],
    portfolios: Sequence[str],
    *,
    methods: Sequence[str],
    confidences: Sequence[float],
    window: int,
    days: int = 250,
    options: Mapping[str, Mapping[str, Any]] | None = None,
    actual_pnl: np.ndarray | None = None,
    seed: int | np.random.Generator | None = 0,
) -> BacktestResult:
    """Forecast and compare every method over the last ``days`` dates.

    Parameters
    ----------
    pnl_history : (P, T_all) array
        Hypothetical daily P&L of today's positions under each historical
        day's returns, ordered like ``dates``.
    dates : (T_all,) dates
        Strictly increasing.
    portfolios : sequence of str, length P
    methods : sequence of str
        Keys of :data:`~tailtrace.backtest.rolling.FORECASTERS`.
    confidences : sequence of float
    window : int
        Estimation window.
    days : int
        Backtest length D (the last D dates).
    options : mapping of method -> mapping, optional
    actual_pnl : (P, D) array, optional
        Realised P&L to compare with instead of the hypothetical one (see
        :func:`~tailtrace.backtest.actual_pnl.read_actual_pnl`).
    seed : int or Generator
        Run seed (Monte Carlo).

    Returns
    -------
    BacktestResult

    Notes
    -----
    The forecast for date t uses the hypothetical P&L of dates before t
    only; it is compared with the P&L of date t itself.
    """
    x = np.asarray(pnl_history, dtype=float)
    d = _day_array(dates)
    names = tuple(str(p) for p in portfolios)
    if x.ndim != 2 or x.shape != (len(names), d.size):
        raise ValueError(f"pnl_history shape {x.shape} does not match {len(names)} portfolios x {d.size} dates")
    bad = np.argwhere(~np.isfinite(x))
    if bad.size:
        p, t = bad[0]
        raise ValueError(f"non-finite hypothetical P&L for portfolio {names[p]!r} on {d[t]} ({len(bad)} in all)")
    if len(set(names)) != len(names):
        raise ConfigError(f"portfolio names must be unique, got {list(names)}")
    forecasts = rolling_forecasts(x, methods, confidences, window=window, days=days, options=options, seed=seed)
    realised = x[:, -int(days) :]
    source = PNL_HYPOTHETICAL
    if actual_pnl is not None:
        realised = np.asarray(actual_pnl, dtype=float)
        if realised.shape != (len(names), int(days)) or not np.isfinite(realised).all():
            raise ValueError(f"actual_pnl must be a finite ({len(names)}, {days}) array, got shape {realised.shape}")
        source = PNL_ACTUAL
    fc = list(forecasts.values())
    return BacktestResult(
        portfolios=names,
        methods=tuple(forecasts),
        confidences=np.asarray(confidences, dtype=float),
        dates=d[-int(days) :],
        pnl=realised,
        var=np.stack([f.var for f in fc]),
        es=np.stack([f.es for f in fc]),
        fallback=np.stack([f.fallback for f in fc]),
        window=int(window),
        pnl_source=source,
        diagnostics={m: dict(f.diagnostics) for m, f in forecasts.items()},
    )
