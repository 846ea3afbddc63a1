"""The common contract every estimator follows.

An estimator is a function ``estimate(sample, confidences, horizons, *,
options, seed) -> RiskEstimate``. Adding a method is one module with such a
function plus one line in :mod:`tailtrace.estimators.registry`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Protocol, Sequence

import numpy as np

__all__ = [
    "RiskSample",
    "RiskEstimate",
    "Estimator",
    "linear_revalue",
    "linear_pnl",
    "as_generator",
    "SCALING_NONE",
    "SCALING_SQRT_TIME",
    "SCALING_OVERLAPPING",
    "SCALING_SIMULATED",
]

SCALING_NONE = "none"  # 1-day figure, nothing scaled
SCALING_SQRT_TIME = "sqrt_time"  # 1-day figure times sqrt(h)
SCALING_OVERLAPPING = "overlapping"  # overlapping h-day historical returns
SCALING_SIMULATED = "simulated"  # h daily steps simulated


def linear_revalue(values: np.ndarray) -> Callable[[np.ndarray, int], np.ndarray]:
    """Return a revaluation function for a linear book.

    Parameters
    ----------
    values : (P, N) array
        Base-currency value of each portfolio's holding in each instrument.

    Returns
    -------
    callable
        ``revalue(log_shocks, horizon_days)`` mapping ``(S, N)`` cumulative
        log returns to ``(P, S)`` P&L: ``values @ expm1(log_shocks).T``.
    """

    def revalue(log_shocks: np.ndarray, horizon_days: int = 1) -> np.ndarray:
        return values @ np.expm1(log_shocks).T

    revalue.linear = True  # type: ignore[attr-defined]  # read by linear_pnl
    return revalue


def linear_pnl(sample: "RiskSample") -> np.ndarray:
    """(P, T) P&L of the holdings ``values`` under the window returns, ``values @ expm1(returns).T``.

    For a linear book (``revalue`` from :func:`linear_revalue`) that is
    ``sample.pnl`` itself, so it is not computed again; books with options
    get their delta-equivalent P&L.
    """
    if getattr(sample.revalue, "linear", False):
        return sample.pnl
    return sample.values @ np.expm1(sample.returns).T


@dataclass(frozen=True)
class RiskSample:
    """Everything an estimator may use for one as_of date.

    Attributes
    ----------
    as_of : numpy.datetime64
        The date the figures are for (data up to and including it).
    portfolios, instruments : tuple of str
        Row labels of ``values`` and column labels of ``returns``.
    dates : (T,) datetime64[D]
        Dates of the window returns (the last one is ``as_of``).
    returns : (T, N) float
        Daily log returns in base currency over the estimation window.
    history : (H, N) float
        All daily log returns available up to ``as_of`` (H >= T), for
        methods that fit on a longer sample (e.g. GARCH).
    values : (P, N) float
        Base-currency value of today's holdings.
    pnl : (P, T) float
        1-day P&L of today's holdings under each window return vector
        (``revalue(returns)``).
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)`` P&L; full
        revaluation of the book. Linear books use :func:`linear_revalue`.
    history_dates : (H,) datetime64[D] or None
        Dates of the ``history`` rows.
    exposures : (P, N) float or None
        First-order sensitivities ``∂P&L/∂r`` to the log returns (base
        currency; option delta-equivalents plus linear values). None for a
        linear book, where they equal ``values``.
    gammas : (P, N, N) float or None
        Second-order sensitivities ``∂²P&L/∂r∂r'`` in log-return space.
        None for a linear book, where they are ``diag(values)``.
    thetas : (P,) float or None
        Base-currency P&L of one calendar day of ageing, all else fixed.
        None when nothing ages (linear book).
    """

    as_of: np.datetime64
    portfolios: tuple[str, ...]
    instruments: tuple[str, ...]
    dates: np.ndarray
    returns: np.ndarray
    history: np.ndarray
    values: np.ndarray
    pnl: np.ndarray
    revalue: Callable[[np.ndarray, int], np.ndarray] = field(repr=False)
    history_dates: np.ndarray | None = None
    exposures: np.ndarray | None = None
    gammas: np.ndarray | None = None
    thetas: np.ndarray | None = None

    @property
    def n_obs(self) -> int:
        return int(self.returns.shape[0])


@dataclass(frozen=True)
class RiskEstimate:
    """Figures of one method for one as_of.

    Arrays are indexed ``[portfolio, confidence, horizon]``. VaR and ES are
    positive numbers for losses, in base currency.

    Attributes
    ----------
    var, es : (P, C, H) float
    scaling : tuple of str, length H
        How each horizon was obtained (``SCALING_*`` constants).
    n_obs : (H,) int
        Observations the figure rests on, per horizon.
    var_se, es_se : (P, C, H) float or None
        Sampling standard error (simulation methods), else None.
    var_lo, var_hi : (P, C, H) float or None
        Confidence band of VaR (e.g. order-statistic or bootstrap), else None.
    diagnostics : dict
        JSON-serialisable notes (fitted parameters, fallbacks used), stored
        with every figure row: keep it small.
    instrument_notes : dict
        Instrument name -> JSON-serialisable notes of that instrument's
        model fit (e.g. its volatility model), stored once per instrument
        in the ``instrument_notes`` table rather than on every figure row.
    """

    var: np.ndarray
    es: np.ndarray
    scaling: tuple[str, ...]
    n_obs: np.ndarray
    var_se: np.ndarray | None = None
    es_se: np.ndarray | None = None
    var_lo: np.ndarray | None = None
    var_hi: np.ndarray | None = None
    diagnostics: Mapping[str, Any] = field(default_factory=dict)
    instrument_notes: Mapping[str, Mapping[str, Any]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        shape = np.shape(self.var)
        if np.shape(self.es) != shape or len(shape) != 3:
            raise ValueError(f"var and es must share a (P, C, H) shape, got {shape} and {np.shape(self.es)}")
        if len(self.scaling) != shape[2] or np.shape(self.n_obs) != (shape[2],):
            raise ValueError("scaling and n_obs need one entry per horizon")
        for name in ("var_se", "es_se", "var_lo", "var_hi"):
            arr = getattr(self, name)
            if arr is not None and np.shape(arr) != shape:
                raise ValueError(f"{name} must have shape {shape}")


class Estimator(Protocol):
    def __call__(
        self,
        sample: RiskSample,
        confidences: Sequence[float],
        horizons: Sequence[int],
        *,
        options: Mapping[str, Any],
        seed: int | np.random.Generator | None = None,
    ) -> RiskEstimate: ...


def as_generator(seed: int | np.random.Generator | None) -> np.random.Generator:
    """Return a numpy Generator from an int seed or pass one through."""
    if isinstance(seed, np.random.Generator):
        return seed
    return np.random.default_rng(seed)
