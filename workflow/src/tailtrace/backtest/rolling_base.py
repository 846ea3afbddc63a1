"""Shared pieces of the rolling 1-day forecasters.

Conventions. ``pnl`` is a (P, T_all) history of daily P&L per portfolio.
The backtest covers the last ``days`` columns, starting at column
``T0 = T_all - days``. The forecast for column ``t`` uses columns
``t - window .. t - 1`` only (and, for GARCH fits, earlier columns), never
column ``t`` or later.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterator, Mapping, Protocol, Sequence

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view
from scipy.special import ndtri

from ..errors import ConfigError

__all__ = [
    "RollingForecast",
    "RollingForecaster",
    "ForecastSetup",
    "prepare",
    "read_options",
    "day_windows",
    "day_chunks",
    "tail_count",
    "rolling_moments",
    "normal_factors",
    "tail_of_sorted",
    "refit_offsets",
    "MAX_CHUNK_ELEMENTS",
]

# Window chunks hold at most this many floats (32 MB) so memory stays flat.
MAX_CHUNK_ELEMENTS = 1 << 22


@dataclass(frozen=True)
class RollingForecast:
    """Out-of-sample 1-day forecasts of one method.

    Attributes
    ----------
    method : str
    var, es : numpy.ndarray, shape (P, C, D)
        VaR and ES as positive loss amounts, for each portfolio, confidence
        and backtest day.
    fallback : numpy.ndarray of bool, shape (P, C, D)
        True where the method's documented fallback replaced its own model
        (Cornish-Fisher not monotone, GARCH fit failed). None at
        construction means all False.
    diagnostics : dict
        JSON-serialisable notes (fitted parameters, fallback reasons).
    """

    method: str
    var: np.ndarray
    es: np.ndarray
    fallback: np.ndarray | None = None
    diagnostics: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        shape = np.shape(self.var)
        if self.fallback is None:  # methods without a fallback
            object.__setattr__(self, "fallback", np.zeros(shape, bool))
        if len(shape) != 3 or np.shape(self.es) != shape or np.shape(self.fallback) != shape:
            raise ValueError(
                f"{self.method}: var, es and fallback must share a (P, C, D) shape, got "
                f"{shape}, {np.shape(self.es)}, {np.shape(self.fallback)}"
            )


class RollingForecaster(Protocol):
    """Common signature of every rolling forecaster."""

    def __call__(
        self,
        pnl: np.ndarray,
        confidences: Sequence[float],
        *,
        window: int,
        days: int = 250,
        options: Mapping[str, Any] | None = None,
        seed: int | np.random.Generator | None = None,
    ) -> RollingForecast: ...


@dataclass(frozen=True)
class ForecastSetup:
    """Validated inputs shared by the forecasters.

    Attributes
    ----------
    pnl : (P, T_all) float array
    confidences : (C,) float array
    window, days : int
    first : int
        Column of the first backtest day, ``T_all - days``.
    """

    pnl: np.ndarray
    confidences: np.ndarray
    window: int
    days: int
    first: int

    @property
    def n_portfolios(self) -> int:
        return int(self.pnl.shape[0])

    def shape(self) -> tuple[int, int, int]:
        return (self.n_portfolios, self.confidences.size, self.days)


def prepare(
    pnl: np.ndarray, confidences: Sequence[float], window: int, days: int, *, min_window: int = 2
) -> ForecastSetup:
    """Check and normalise the common forecaster inputs.

    Raises
    ------
    ValueError
        Wrong array shape or non-finite P&L (position given).
    ConfigError
        Window, backtest length or confidences that cannot work with the data.
    """
    # C order: reductions then run in the same order whatever the caller's layout,
    # so results are bit-identical for equal data.
    x = np.ascontiguousarray(pnl, dtype=float)
    if x.ndim != 2:
        raise ValueError(f"pnl must be a (portfolios, days) array, got shape {x.shape}")
    bad = np.argwhere(~np.isfinite(x))
    if bad.size:
        p, t = bad[0]
        raise ValueError(f"pnl has {len(bad)} non-finite values; first at portfolio row {p}, day column {t}")
    c = np.asarray(confidences, dtype=float).ravel()
    if c.size == 0 or np.any(~(c > 0.5)) or np.any(~(c < 1.0)):
        raise ConfigError(f"confidences must lie in (0.5, 1), got {c.tolist()}")
    if int(window) != window or window < min_window:
        raise ConfigError(f"window must be an integer >= {min_window}, got {window!r}")
    if int(days) != days or days < 1:
        raise ConfigError(f"backtest days must be a positive integer, got {days!r}")
    window, days = int(window), int(days)
    if x.shape[1] < window + days:
        raise ConfigError(
            f"a backtest of {days} days with a {window}-day window needs {window + days} days of P&L, "
            f"only {x.shape[1]} available"
        )
    return ForecastSetup(pnl=x, confidences=c, window=window, days=days, first=x.shape[1] - days)


def read_options(method: str, options: Mapping[str, Any] | None, defaults: Mapping[str, Any]) -> dict[str, Any]:
    """Merge user options over defaults.

    Unknown keys, and values whose type does not match the default's (bool,
    int or number), are a ConfigError naming the method and the key.
    """
    given = dict(options or {})
    unknown = sorted(set(given) - set(defaults))
    if unknown:
        raise ConfigError(f"{method}: unknown option(s) {unknown}; allowed: {sorted(defaults)}")
    for key, value in given.items():
        default = defaults[key]
        if isinstance(default, bool):
            ok = isinstance(value, (bool, np.bool_))
        elif isinstance(default, int):
            ok = isinstance(value, (int, np.integer)) and not isinstance(value, bool)
        elif isinstance(default, float):
            ok = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
        else:
            ok = True
        if not ok:
            raise ConfigError(f"{method}: option {key!r} must be {type(default).__name__}, got {value!r}")
    return {**defaults, **given}


def day_windows(
    x: np.ndarray, window: int, start: int, stop: int, *, extra: int = 1
) -> Iterator[tuple[slice, np.ndarray]]:
    """Yield read-only sliding windows for forecast columns ``start..stop-1``.

    Parameters
    ----------
    x : (P, T) array
    window : int
    start, stop : int
        Forecast columns; the window of column t is ``x[:, t-window:t]``.
    extra : int
        Multiplier of the chunk's memory use by the caller (e.g. number of
        confidences), to size the chunks.

    Yields
    ------
    days : slice
        Positions ``t - start`` of the chunk within ``start..stop-1``.
    windows : (P, n, window) view
    """
    for days in day_chunks(stop - start, x.shape[0] * window * max(1, extra)):
        a, b = start + days.start, start + days.stop
        yield days, sliding_window_view(x[:, a - window : b - 1], window, axis=-1)


def day_chunks(n_days: int, per_day: int) -> Iterator[slice]:
    """Split ``range(n_days)`` into slices of at most MAX_CHUNK_ELEMENTS / per_day days.

    Chunks only bound memory; the work inside each is one array operation.
    """
    step = max(1, MAX_CHUNK_ELEMENTS // max(1, per_day))
    for a in range(0, n_days, step):
        yield slice(a, min(n_days, a + step))


def tail_count(n: int, confidences: np.ndarray) -> np.ndarray:
    """Number of worst outcomes in the tail: ``k = max(1, floor(n (1 - c)))``.

    A 1e-9 guard keeps ``floor`` from losing one to binary rounding
    (``50 * (1 - 0.9) = 4.999999999999999``). Common practice, no source:
    n = 500, c = 0.99 gives k = 5, the 5th worst loss.
    """
    k = np.floor(n * (1.0 - np.asarray(confidences, dtype=float)) + 1e-9).astype(np.int64)
    return np.maximum(k, 1)


def tail_of_sorted(worst_first: np.ndarray, k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """VaR and ES from losses sorted worst first along the last axis.

    Parameters
    ----------
    worst_first : (..., n) array
        Losses, largest first (at least ``max(k)`` of them).
    k : (C,) int array

    Returns
    -------
    var, es : (..., C) arrays
        The k-th largest loss and the mean of the k largest.
    """
    csum = np.cumsum(worst_first[..., : int(k.max())], axis=-1)
    var = worst_first[..., k - 1]
    es = csum[..., k - 1] / k
    return var, es


def rolling_moments(setup: ForecastSetup, order: int = 2) -> dict[str, np.ndarray]:
    """Window mean, standard deviation and (order 4) skewness, excess kurtosis.

    Parameters
    ----------
    setup : ForecastSetup
    order : {2, 4}

    Returns
    -------
    dict of (P, D) arrays
        ``mean``, ``std`` (ddof = 1); with ``order=4`` also ``skew``
        ``m3 / m2^1.5`` and ``exkurt`` ``m4 / m2^2 - 3`` (central moments
        with divisor n). Windows with zero variance get skew = exkurt = 0.

    Notes
    -----
    Computed per window by two passes over sliding windows (exact, no
    drift from running sums).
    """
    P, D = setup.n_portfolios, setup.days
    out = {name: np.empty((P, D)) for name in ("mean", "std", "skew", "exkurt")[: 2 if order == 2 else 4]}
    for days, win in day_windows(setup.pnl, setup.window, setup.first, setup.first + setup.days):
        mean = win.mean(axis=-1)
        dev = win - mean[..., None]
        dev2 = dev * dev
        m2 = np.mean(dev2, axis=-1)
        out["mean"][:, days] = mean
        out["std"][:, days] = np.sqrt(m2 * setup.window / (setup.window - 1))
        if order == 4:
            pos = m2 > 0
            safe = np.where(pos, m2, 1.0)
            m3 = np.mean(dev2 * dev, axis=-1)
            m4 = np.mean(dev2 * dev2, axis=-1)
            out["skew"][:, days] = np.where(pos, m3 / safe**1.5, 0.0)
            out["exkurt"][:, days] = np.where(pos, m4 / safe**2 - 3.0, 0.0)
    return out


def normal_factors(confidences: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Standard normal VaR and ES factors ``z_c`` and ``phi(z_c) / (1 - c)``."""
    z = ndtri(confidences)
    return z, np.exp(-0.5 * z * z) / np.sqrt(2.0 * np.pi) / (1.0 - confidences)


def refit_offsets(days: int, refit_every: int) -> np.ndarray:
    """Backtest-day offsets at which a model is refitted: 0, R, 2R, ..."""
    if int(refit_every) != refit_every or refit_every < 1:
        raise ConfigError(f"refit_every must be a positive integer, got {refit_every!r}")
    return np.arange(0, days, int(refit_every))
