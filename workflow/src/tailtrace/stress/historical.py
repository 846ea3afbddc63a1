"""Historical stress: worst losses over the whole history and replays of named windows."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from ..errors import ConfigError, InputError
from .records import KIND_WINDOW, KIND_WORST_1D, KIND_WORST_HD, StressRecord, make_detail
from .yamlconfig import load_yaml_document, parse_date, schema_path

__all__ = [
    "horizon_log_returns",
    "check_history_dates",
    "revalue_path",
    "WorstLosses",
    "worst_losses",
    "StressWindow",
    "load_stress_windows",
    "WindowReplay",
    "replay_windows",
]

Revalue = Callable[[np.ndarray, int], np.ndarray]


def horizon_log_returns(history: np.ndarray, horizon_days: int) -> np.ndarray:
    """Overlapping ``h``-day log returns from cumulative sums.

    Parameters
    ----------
    history : (H, N) array
        Daily log returns.
    horizon_days : int
        Window length ``h`` (1 returns ``history`` itself).

    Returns
    -------
    (H − h + 1, N) array
        Row ``t`` is ``sum(history[t : t + h])``.

    Notes
    -----
    ``C_t = Σ_{s<t} r_s`` with ``C_0 = 0``; the h-day return starting at
    ``t`` is ``C_{t+h} − C_t``: O(H·N) whatever ``h``.
    """
    history = np.asarray(history, dtype=float)
    h = int(horizon_days)
    if h < 1:
        raise ConfigError(f"horizon_days must be at least 1, got {h}")
    if h > history.shape[0]:
        raise ConfigError(f"horizon of {h} days is longer than the history of {history.shape[0]} days")
    if h == 1:
        return history
    cum = np.concatenate([np.zeros((1, history.shape[1])), np.cumsum(history, axis=0)])
    return cum[h:] - cum[:-h]


def revalue_path(revalue: Revalue, cumulative_log_returns: np.ndarray) -> np.ndarray:
    """P&L of today's book after each day of a path.

    Parameters
    ----------
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)``.
    cumulative_log_returns : (K, N) array
        Row ``k`` is the log move from the start of the path to the end of
        day ``k + 1``.

    Returns
    -------
    (P, K) array

    Notes
    -----
    One revaluation call per day, because row ``k`` must age the book by
    ``k + 1`` days (options) and the revaluation contract takes one horizon
    per call; each call is vectorised over portfolios.
    """
    cols = [revalue(cumulative_log_returns[k : k + 1], k + 1) for k in range(cumulative_log_returns.shape[0])]
    return np.concatenate(cols, axis=1)


def check_history_dates(history: np.ndarray, history_dates: np.ndarray) -> np.ndarray:
    """``history_dates`` as datetime64[D], checked to match ``history`` rows and to increase."""
    dates = np.asarray(history_dates).astype("datetime64[D]")
    if dates.shape != (np.shape(history)[0],):
        raise ValueError(f"history_dates has shape {dates.shape}, history has {np.shape(history)[0]} rows")
    if dates.size > 1 and not np.all(dates[1:] > dates[:-1]):
        raise ValueError("history_dates must be strictly increasing")
    return dates


@dataclass(frozen=True)
class WorstLosses:
    """Worst P&L of today's book over every h-day stretch of the history.

    Attributes
    ----------
    portfolios : tuple of str
    horizons : (K,) int
    pnl : (P, K) float
        Most negative P&L per portfolio and horizon.
    start_dates, end_dates : (P, K) datetime64[D]
        First and last trading day of the worst stretch.
    n_windows : (K,) int
        Number of overlapping stretches scanned, ``H − h + 1``.
    """

    portfolios: tuple[str, ...]
    horizons: np.ndarray
    pnl: np.ndarray
    start_dates: np.ndarray
    end_dates: np.ndarray
    n_windows: np.ndarray

    def records(self, as_of: np.datetime64) -> list[StressRecord]:
        """Rows ``historical_worst_1d`` (h = 1) and ``historical_worst_hd`` (h > 1)."""
        out = []
        for k, h in enumerate(self.horizons):
            kind = KIND_WORST_1D if h == 1 else KIND_WORST_HD
            for p, name in enumerate(self.portfolios):
                out.append(
                    StressRecord(
                        as_of=np.datetime64(as_of, "D"),
                        portfolio=name,
                        scenario=f"worst_{int(h)}d",
                        kind=kind,
                        horizon_days=int(h),
                        start_date=self.start_dates[p, k],
                        end_date=self.end_dates[p, k],
                        pnl=float(self.pnl[p, k]),
                        detail=make_detail(n_windows=int(self.n_windows[k]), overlapping=bool(h > 1)),
                    )
                )
        return out


def worst_losses(
    history: np.ndarray,
    history_dates: np.ndarray,
    revalue: Revalue,
    horizons: Sequence[int],
    *,
    portfolios: Sequence[str],
) -> WorstLosses:
    """Worst 1-day and h-day P&L of today's positions over the whole history.

    Parameters
    ----------
    history : (H, N) array
        Daily base-currency log returns up to as_of.
    history_dates : (H,) datetime64
        Date of each row of ``history``.
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)``.
    horizons : sequence of int
        Horizons in trading days, e.g. ``[1, 10]``.
    portfolios : sequence of str
        Labels of the P rows ``revalue`` returns.

    Returns
    -------
    WorstLosses

    Notes
    -----
    For each horizon h the book is revalued once under all H − h + 1
    overlapping h-day log returns (:func:`horizon_log_returns`);
    the minimum P&L per portfolio and its window are kept. Ties go to the
    earliest window.
    """
    dates = check_history_dates(history, history_dates)
    hs = np.asarray([int(h) for h in horizons], dtype=int)
    P = len(portfolios)
    pnl = np.empty((P, hs.size))
    starts = np.empty((P, hs.size), dtype="datetime64[D]")
    ends = np.empty((P, hs.size), dtype="datetime64[D]")
    n_windows = np.empty(hs.size, dtype=int)
    for k, h in enumerate(hs):  # a handful of horizons, each one revaluation call
        scen = revalue(horizon_log_returns(history, h), int(h))
        worst = np.argmin(scen, axis=1)
        pnl[:, k] = scen[np.arange(P), worst]
        starts[:, k] = dates[worst]
        ends[:, k] = dates[worst + h - 1]
        n_windows[k] = scen.shape[1]
    return WorstLosses(tuple(portfolios), hs, pnl, starts, ends, n_windows)


@dataclass(frozen=True)
class StressWindow:
    """A named historical window from ``stress_windows.yaml``.

    Attributes
    ----------
    name, description : str
    start, end : numpy.datetime64
        First and last calendar day of the window (inclusive).
    file : str
    line : int
        Where the entry stands, for error messages.
    """

    name: str
    start: np.datetime64
    end: np.datetime64
    description: str
    file: str = ""
    line: int | None = None


def load_stress_windows(path: str | Path, *, schema: str | Path | None = None) -> tuple[StressWindow, ...]:
    """Read and validate the named stress windows.

    Parameters
    ----------
    path : path
        ``stress_windows.yaml`` (see ``workflow/schemas/stress_windows.schema.yaml``).
    schema : path, optional
        Schema file; defaults to the one beside the package.

    Returns
    -------
    tuple of StressWindow

    Raises
    ------
    InputError
        Schema violation, bad date, start after end or a repeated name, with
        file, line and key.
    """
    doc = load_yaml_document(path, schema or schema_path("stress_windows.schema.yaml"))
    out: list[StressWindow] = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(doc.data["windows"]):
        where = ["windows", i]
        start = parse_date(doc, where + ["start"], entry["start"])
        end = parse_date(doc, where + ["end"], entry["end"])
        name = entry["name"]
        if end < start:
            raise doc.error(f"window '{name}': end {end} is before start {start}", where + ["end"], "end", str(end))
        if name in seen:
            raise doc.error(
                f"window name '{name}' repeats the entry at line {seen[name]}", where + ["name"], "name", name
            )
        line = doc.line_of(where)
        seen[name] = line
        out.append(StressWindow(name, start, end, entry.get("description", ""), doc.file, line))
    return tuple(out)


@dataclass(frozen=True)
class WindowReplay:
    """Today's book replayed through named historical windows.

    Attributes
    ----------
    portfolios : tuple of str
    windows : tuple of StressWindow
    start_dates, end_dates : (W,) datetime64[D]
        First and last trading day inside each window.
    n_days : (W,) int
    pnl : (P, W) float
        Cumulative P&L over the window (today's positions, no rebalancing).
    drawdown_pnl : (P, W) float
        P&L from the highest to the lowest later point of the cumulative
        path (≤ 0).
    drawdown_from, drawdown_to : (P, W) datetime64[D]
        Last close at the peak level before the trough, and the trough;
        NaT when there is no drawdown,
        and ``drawdown_from`` is NaT when the peak is the close before the
        first return of the history.
    worst_day_pnl : (P, W) float
    worst_day_date : (P, W) datetime64[D]
    """

    portfolios: tuple[str, ...]
    windows: tuple[StressWindow, ...]
    start_dates: np.ndarray
    end_dates: np.ndarray
    n_days: np.ndarray
    pnl: np.ndarray
    drawdown_pnl: np.ndarray
    drawdown_from: np.ndarray
    drawdown_to: np.ndarray
    worst_day_pnl: np.ndarray
    worst_day_date: np.ndarray

    def records(self, as_of: np.datetime64) -> list[StressRecord]:
        """Rows of kind ``window``, horizon = trading days in the window."""
        out = []
        for w, win in enumerate(self.windows):
            for p, name in enumerate(self.portfolios):
                dd_from, dd_to = self.drawdown_from[p, w], self.drawdown_to[p, w]
                out.append(
                    StressRecord(
                        as_of=np.datetime64(as_of, "D"),
                        portfolio=name,
                        scenario=win.name,
                        kind=KIND_WINDOW,
                        horizon_days=int(self.n_days[w]),
                        start_date=self.start_dates[w],
                        end_date=self.end_dates[w],
                        pnl=float(self.pnl[p, w]),
                        detail=make_detail(
                            description=win.description,
                            drawdown_pnl=float(self.drawdown_pnl[p, w]),
                            drawdown_from=None if np.isnat(dd_from) else dd_from,
                            drawdown_to=None if np.isnat(dd_to) else dd_to,
                            worst_day_pnl=float(self.worst_day_pnl[p, w]),
                            worst_day_date=self.worst_day_date[p, w],
                        ),
                    )
                )
        return out


def _max_drawdown(path: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Peak-to-trough P&L of paths (P, K) that start from 0: (value, peak col, trough col).

    The peak column is -1 when the peak is the starting point.
    """
    P, K = path.shape
    full = np.concatenate([np.zeros((P, 1)), path], axis=1)
    peaks = np.maximum.accumulate(full, axis=1)
    drop = full - peaks  # ≤ 0
    trough = np.argmin(drop, axis=1)
    cols = np.arange(K + 1)
    # peak = last column at or before the trough where the running maximum was set
    at_peak = (full == peaks[np.arange(P), trough][:, None]) & (cols[None, :] <= trough[:, None])
    peak = np.max(np.where(at_peak, cols[None, :], -1), axis=1)
    return drop[np.arange(P), trough], peak - 1, trough - 1


def replay_windows(
    windows: Sequence[StressWindow],
    history: np.ndarray,
    history_dates: np.ndarray,
    revalue: Revalue,
    *,
    portfolios: Sequence[str],
) -> WindowReplay:
    """Replay each window's returns on today's positions.

    Parameters
    ----------
    windows : sequence of StressWindow
    history : (H, N) array
        Daily base-currency log returns up to as_of.
    history_dates : (H,) datetime64
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)``.
    portfolios : sequence of str

    Returns
    -------
    WindowReplay

    Raises
    ------
    InputError
        A window starts before the first or ends after the last date of
        the history, or holds no trading day; the error names the YAML file,
        line and entry.

    Notes
    -----
    With ``r_t`` the returns of the K trading days in the window, the path
    is ``V_k = revalue(Σ_{t≤k} r_t, k)``, the window P&L is ``V_K`` and the
    drawdown ``min_k (V_k − max_{j≤k} V_j)`` with ``V_0 = 0``.
    """
    dates = check_history_dates(history, history_dates)
    P, W = len(portfolios), len(windows)
    res = {
        "start_dates": np.empty(W, dtype="datetime64[D]"),
        "end_dates": np.empty(W, dtype="datetime64[D]"),
        "n_days": np.empty(W, dtype=int),
        "pnl": np.empty((P, W)),
        "drawdown_pnl": np.empty((P, W)),
        "drawdown_from": np.empty((P, W), dtype="datetime64[D]"),
        "drawdown_to": np.empty((P, W), dtype="datetime64[D]"),
        "worst_day_pnl": np.empty((P, W)),
        "worst_day_date": np.empty((P, W), dtype="datetime64[D]"),
    }
    for w, win in enumerate(windows):
        if dates.size == 0 or win.start < dates[0] or win.end > dates[-1]:
            span = "no history" if dates.size == 0 else f"history covers {dates[0]} to {dates[-1]}"
            column = "start" if dates.size == 0 or win.start < dates[0] else "end"
            raise InputError(
                f"stress window '{win.name}' ({win.start} to {win.end}) lies outside the available history ({span})",
                file=win.file,
                row=win.line,
                column=column,
                value=str(win.start if column == "start" else win.end),
            )
        s, e = np.searchsorted(dates, win.start, "left"), np.searchsorted(dates, win.end, "right")
        if e <= s:
            raise InputError(
                f"stress window '{win.name}' ({win.start} to {win.end}) holds no trading day of the history",
                file=win.file,
                row=win.line,
            )
        block = history[s:e]
        path = revalue_path(revalue, np.cumsum(block, axis=0))
        daily = revalue(block, 1)
        dd, peak, trough = _max_drawdown(path)
        idx = np.arange(P)
        worst = np.argmin(daily, axis=1)
        res["start_dates"][w], res["end_dates"][w], res["n_days"][w] = dates[s], dates[e - 1], e - s
        res["pnl"][:, w] = path[:, -1]
        res["drawdown_pnl"][:, w] = dd
        before = dates[s - 1] if s > 0 else np.datetime64("NaT", "D")
        res["drawdown_from"][:, w] = np.where(peak >= 0, dates[s + np.maximum(peak, 0)], before)
        nat = np.datetime64("NaT", "D")
        res["drawdown_from"][:, w] = np.where(dd < 0, res["drawdown_from"][:, w], nat)
        res["drawdown_to"][:, w] = np.where(trough >= 0, dates[s + np.maximum(trough, 0)], nat)
        res["worst_day_pnl"][:, w] = daily[idx, worst]
        res["worst_day_date"][:, w] = dates[s + worst]
    return WindowReplay(tuple(portfolios), tuple(windows), **res)
