"""Stressed calibration: find the worst 250-day window and rebuild the sample on it."""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable, Sequence

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..errors import ConfigError
from ..estimators.base import RiskSample
from ..estimators.tail import tail_count
from .historical import check_history_dates, horizon_log_returns

__all__ = [
    "BASIS_AGGREGATE",
    "BASIS_PER_PORTFOLIO",
    "StressedWindow",
    "StressedWindowScan",
    "rolling_expected_shortfall",
    "find_stressed_window",
    "window_from_dates",
    "stressed_sample",
]

Revalue = Callable[[np.ndarray, int], np.ndarray]
BASIS_AGGREGATE = "aggregate"  # one window for all portfolios: that of their summed P&L
BASIS_PER_PORTFOLIO = "per_portfolio"
_CHUNK_ELEMENTS = 4_000_000  # bounds the copy np.partition makes


def rolling_expected_shortfall(pnl: np.ndarray, window: int, confidence: float) -> np.ndarray:
    """Historical ES of every run of ``window`` consecutive P&L values.

    Parameters
    ----------
    pnl : (G, T) array
        P&L series, negative = loss.
    window : int
        Observations per window ``M``.
    confidence : float

    Returns
    -------
    (G, T − M + 1) array
        ES (positive = loss) of ``pnl[:, w : w + M]`` for each start ``w``.

    Notes
    -----
    ES is the mean of the ``k = max(1, ⌊M(1 − c)⌋)`` largest losses, the rule
    of :func:`tailtrace.estimators.tail.tail_count`, so stressed and
    current historical figures use one convention. Windows are processed in
    chunks with ``np.partition`` (O(M) per window) to bound memory.
    """
    losses = -np.asarray(pnl, dtype=float)
    G, T = losses.shape
    if window > T:
        raise ConfigError(f"window of {window} observations is longer than the series of {T}")
    k = tail_count(window, confidence)
    views = sliding_window_view(losses, window, axis=1)  # (G, W, M), no copy
    W = views.shape[1]
    out = np.empty((G, W))
    step = max(1, _CHUNK_ELEMENTS // max(1, G * window))
    for a in range(0, W, step):  # chunks of windows, each fully vectorised
        block = np.partition(views[:, a : a + step], window - k, axis=-1)
        out[:, a : a + step] = block[..., window - k :].mean(axis=-1)
    return out


@dataclass(frozen=True)
class StressedWindow:
    """The stressed period chosen for one label.

    Attributes
    ----------
    label : str
        ``aggregate`` or the portfolio name.
    start_index, end_index : int
        Rows of the history (end inclusive).
    start_date, end_date : numpy.datetime64
    es : float
        ES of the window that made it the worst.
    length_days, horizon_days : int
    confidence : float
    """

    label: str
    start_index: int
    end_index: int
    start_date: np.datetime64
    end_date: np.datetime64
    es: float
    length_days: int
    horizon_days: int
    confidence: float


@dataclass(frozen=True)
class StressedWindowScan:
    """ES of every candidate window, and the worst one per label.

    Attributes
    ----------
    basis : str
        :data:`BASIS_AGGREGATE` or :data:`BASIS_PER_PORTFOLIO`.
    labels : tuple of str
        ``("aggregate",)`` or the portfolio names.
    window_start_dates, window_end_dates : (W,) datetime64[D]
    es : (G, W) float
        ES per label and window (for a chart of stress through time).
    best : (G,) int
        Index of the window with the largest ES (earliest on ties).
    length_days, horizon_days : int
    confidence : float
    """

    basis: str
    labels: tuple[str, ...]
    window_start_dates: np.ndarray
    window_end_dates: np.ndarray
    es: np.ndarray
    best: np.ndarray
    length_days: int
    horizon_days: int
    confidence: float

    def window(self, label: str | int = 0) -> StressedWindow:
        """The stressed window of ``label`` (name or position)."""
        g = self.labels.index(label) if isinstance(label, str) else int(label)
        w = int(self.best[g])
        return StressedWindow(
            label=self.labels[g],
            start_index=w,
            end_index=w + self.length_days - 1,
            start_date=self.window_start_dates[w],
            end_date=self.window_end_dates[w],
            es=float(self.es[g, w]),
            length_days=self.length_days,
            horizon_days=self.horizon_days,
            confidence=self.confidence,
        )


def find_stressed_window(
    history: np.ndarray,
    history_dates: np.ndarray,
    revalue: Revalue,
    *,
    portfolios: Sequence[str],
    length_days: int = 250,
    confidence: float = 0.975,
    horizon_days: int = 1,
    basis: str = BASIS_AGGREGATE,
) -> StressedWindowScan:
    """Scan every ``length_days`` window of the history for the largest ES.

    Parameters
    ----------
    history : (H, N) array
        Daily base-currency log returns up to as_of.
    history_dates : (H,) datetime64
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)``.
    portfolios : sequence of str
    length_days : int
        Window length in trading days (250: twelve months).
    confidence : float
        ES confidence (0.975).
    horizon_days : int
        P&L horizon inside the window: 1, or h > 1 for the L − h + 1
        overlapping h-day P&L of each window.
    basis : str
        ``aggregate`` (default): one window for all portfolios, the one with
        the largest ES of their summed P&L. ``per_portfolio``: a window each.

    Returns
    -------
    StressedWindowScan

    Notes
    -----
    Today's book is revalued once under all overlapping h-day returns of
    the history; ES of each window of ``L − h + 1`` consecutive P&L values
    comes from :func:`rolling_expected_shortfall`. The aggregate basis
    follows the practice of one stressed period for the whole firm, so the
    stressed figures of all portfolios describe the same episode.

    References
    ----------
    Basel Committee on Banking Supervision, *Minimum capital requirements
    for market risk*, January 2019 (MAR33: ES calibrated to a period of
    stress of twelve months).
    """
    if basis not in (BASIS_AGGREGATE, BASIS_PER_PORTFOLIO):
        raise ConfigError(f"basis must be '{BASIS_AGGREGATE}' or '{BASIS_PER_PORTFOLIO}', got {basis!r}")
    dates = check_history_dates(history, history_dates)
    H = dates.size
    if not 1 <= horizon_days <= length_days:
        raise ConfigError(f"horizon_days must be between 1 and length_days ({length_days}), got {horizon_days}")
    if length_days > H:
        raise ConfigError(f"the history holds {H} days, fewer than the stressed window of {length_days}")
    pnl = revalue(horizon_log_returns(history, horizon_days), horizon_days)  # (P, H - h + 1)
    if basis == BASIS_AGGREGATE:
        pnl, labels = pnl.sum(axis=0, keepdims=True), (BASIS_AGGREGATE,)
    else:
        labels = tuple(portfolios)
    es = rolling_expected_shortfall(pnl, length_days - horizon_days + 1, confidence)
    W = H - length_days + 1
    return StressedWindowScan(
        basis=basis,
        labels=labels,
        window_start_dates=dates[:W],
        window_end_dates=dates[length_days - 1 :],
        es=es,
        best=np.argmax(es, axis=1),
        length_days=int(length_days),
        horizon_days=int(horizon_days),
        confidence=float(confidence),
    )


def window_from_dates(
    history_dates: np.ndarray,
    start_date: np.datetime64 | str,
    end_date: np.datetime64 | str,
    *,
    label: str = BASIS_AGGREGATE,
    es: float = float("nan"),
    horizon_days: int = 1,
    confidence: float = 0.975,
) -> StressedWindow:
    """Rebuild a :class:`StressedWindow` from its stored dates (e.g. a ``stressed_windows`` row).

    Parameters
    ----------
    history_dates : (H,) datetime64
    start_date, end_date : date-like
        First and last trading day of the window; both must be in ``history_dates``.
    label, es, horizon_days, confidence
        Carried through for reporting.

    Returns
    -------
    StressedWindow

    Raises
    ------
    ValueError
        A date that is not a trading day of this history.
    """
    dates = np.asarray(history_dates).astype("datetime64[D]")
    start, end = np.datetime64(start_date, "D"), np.datetime64(end_date, "D")
    s, e = np.searchsorted(dates, start), np.searchsorted(dates, end)
    if s >= dates.size or e >= dates.size or dates[s] != start or dates[e] != end or e < s:
        raise ValueError(f"stressed window {start} to {end} is not a span of trading days of this history")
    return StressedWindow(label, int(s), int(e), start, end, float(es), int(e - s + 1), int(horizon_days), float(confidence))


def stressed_sample(
    sample: RiskSample,
    history_dates: np.ndarray,
    window: StressedWindow,
    *,
    portfolios: Sequence[str] | None = None,
) -> RiskSample:
    """The sample with its window returns replaced by the stressed window's.

    Parameters
    ----------
    sample : RiskSample
        Current sample for as_of.
    history_dates : (H,) datetime64
        Dates of ``sample.history``.
    window : StressedWindow
    portfolios : sequence of str, optional
        Keep only these portfolios (for the per-portfolio basis).

    Returns
    -------
    RiskSample
        ``returns`` and ``dates`` of the stressed window, ``history`` cut at
        the window's end (so fitted models see the market as it stood then),
        ``pnl`` recomputed; ``as_of``, positions and revaluation unchanged.
        Every estimator runs on it unchanged.
    """
    dates = check_history_dates(sample.history, history_dates)
    s, e = window.start_index, window.end_index + 1
    if s < 0 or e > dates.size or dates[s] != window.start_date or dates[e - 1] != window.end_date:
        raise ValueError("the stressed window does not belong to this history")
    values, revalue, names = sample.values, sample.revalue, sample.portfolios
    if portfolios is not None:
        idx = np.array([sample.portfolios.index(p) for p in portfolios], dtype=int)
        parent = sample.revalue
        values, names = sample.values[idx], tuple(portfolios)

        def revalue(log_shocks: np.ndarray, horizon_days: int = 1) -> np.ndarray:
            return parent(log_shocks, horizon_days)[idx]

    returns = sample.history[s:e]
    return replace(
        sample,
        portfolios=names,
        dates=dates[s:e],
        returns=returns,
        history=sample.history[:e],
        values=values,
        pnl=revalue(returns, 1),
        revalue=revalue,
    )
