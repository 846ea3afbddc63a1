"""Horizon scaling shared by the methods that scale a 1-day figure."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from .base import SCALING_NONE, SCALING_SQRT_TIME, RiskEstimate

__all__ = ["sqrt_time_labels", "scale_sqrt_time", "location_scale_var_es", "sqrt_time_estimate"]


def sqrt_time_labels(horizons: Sequence[int]) -> tuple[str, ...]:
    """``scaling`` labels of a square-root-of-time method: ``none`` for 1 day."""
    return tuple(SCALING_NONE if int(h) == 1 else SCALING_SQRT_TIME for h in horizons)


def scale_sqrt_time(one_day: np.ndarray, horizons: Sequence[int]) -> np.ndarray:
    """Scale ``(..., C)`` 1-day figures to ``(..., C, H)`` by √h.

    Notes
    -----
    ``X_h = X_1 √h`` holds for iid zero-mean returns (common practice, no
    source); it understates risk when volatility clusters or returns trend.
    """
    root_h = np.sqrt(np.asarray(horizons, dtype=float))
    return np.asarray(one_day, dtype=float)[..., None] * root_h


def location_scale_var_es(
    mu: np.ndarray, sigma: np.ndarray, f_var: np.ndarray, f_es: np.ndarray, horizons: Sequence[int]
) -> tuple[np.ndarray, np.ndarray]:
    """VaR and ES ``(P, C, H)`` of a location-scale P&L from standardised factors.

    Parameters
    ----------
    mu, sigma : (P,) daily P&L mean and st. dev.
    f_var, f_es : (P, C) VaR and ES of the standardised (unit-variance) law
    horizons : sequence of int

    Notes
    -----
    ``VaR = σ√h f_var − μh`` and ``ES = σ√h f_es − μh``.
    """
    h = np.asarray(horizons, dtype=float)
    sig = np.asarray(sigma, dtype=float)[:, None, None] * np.sqrt(h)
    drift = np.asarray(mu, dtype=float)[:, None, None] * h
    return sig * f_var[:, :, None] - drift, sig * f_es[:, :, None] - drift


def sqrt_time_estimate(
    var1: np.ndarray,
    es1: np.ndarray,
    horizons: Sequence[int],
    n_obs: int,
    *,
    band: tuple[np.ndarray, np.ndarray] | None = None,
    diagnostics: Mapping[str, Any] | None = None,
) -> RiskEstimate:
    """A :class:`RiskEstimate` from ``(P, C)`` 1-day figures scaled by √h.

    Parameters
    ----------
    var1, es1 : (P, C) 1-day VaR and ES
    horizons : sequence of int
    n_obs : int
    band : (lo, hi) of shape (P, C, H), optional, already scaled
    diagnostics : mapping, optional
    """
    lo, hi = band if band is not None else (None, None)
    return RiskEstimate(
        var=scale_sqrt_time(var1, horizons),
        es=scale_sqrt_time(es1, horizons),
        scaling=sqrt_time_labels(horizons),
        n_obs=np.full(len(horizons), n_obs),
        var_lo=lo,
        var_hi=hi,
        diagnostics=dict(diagnostics or {}),
    )
