"""Exponentially weighted (EWMA) covariance and the normal VaR built on it."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from .base import RiskEstimate, RiskSample, linear_pnl
from .parametric import normal_var_es
from .scaling import sqrt_time_labels

__all__ = ["DEFAULT_DECAY", "ewma_weights", "ewma_covariance", "ewma_variance_path", "ewma_moments", "estimate"]

DEFAULT_DECAY = 0.94  # daily data, the industry default published in 1996


def ewma_weights(n: int, decay: float) -> np.ndarray:
    """Weights of the EWMA forecast on ``n`` observations ordered oldest first.

    Parameters
    ----------
    n : int
    decay : float
        λ in (0, 1].

    Returns
    -------
    (n,) array summing to 1.

    Notes
    -----
    The recursion ``Σ_{t+1} = λΣ_t + (1 − λ) r_t r_tᵀ`` seeded with the
    equally weighted second moment ``Σ_1 = (1/n) Σ_t r_t r_tᵀ`` of the same
    window unrolls to ``Σ_{n+1} = Σ_i w_i r_{n−i} r_{n−i}ᵀ`` with
    ``w_i = (1 − λ)λ^i + λ^n/n`` for age i = 0 (newest) … n − 1. The seed's
    share λ^n vanishes for long windows and λ → 1 gives equal weights 1/n.
    """
    if not 0.0 < decay <= 1.0:
        raise ValueError(f"decay must lie in (0, 1], got {decay}")
    age = np.arange(n - 1, -1, -1, dtype=float)
    return (1.0 - decay) * decay**age + decay**n / n


def ewma_covariance(x: np.ndarray, decay: float) -> np.ndarray:
    """EWMA forecast of the next day's covariance (zero mean), ``(N, N)``.

    Parameters
    ----------
    x : (T, N) array of daily returns, oldest first
    decay : float

    Notes
    -----
    One weighted cross product with :func:`ewma_weights`; no loop over days.

    References
    ----------
    Hull, *Risk Management and Financial Institutions*, volatility chapter
    (EWMA with the 1996 industry default λ = 0.94).
    """
    x = np.asarray(x, dtype=float)
    w = ewma_weights(x.shape[0], decay)
    return (x * w[:, None]).T @ x


def ewma_variance_path(x: np.ndarray, decay: float, seed_variance: np.ndarray) -> np.ndarray:
    """EWMA variance of every day and the next-day forecast, ``(T + 1, N)``.

    Parameters
    ----------
    x : (T, N) array
    decay : float
    seed_variance : (N,) array
        σ²_1, the variance assumed for the first day.

    Returns
    -------
    (T + 1, N) array: row t is the variance of day t given days before it;
    the last row is the forecast for the day after the sample.

    Notes
    -----
    ``σ²_{t+1} = λσ²_t + (1 − λ)x_t²``, run as a first-order linear filter
    (:func:`scipy.signal.lfilter`) rather than a loop over days.
    """
    from scipy.signal import lfilter

    x = np.asarray(x, dtype=float)
    seed_variance = np.asarray(seed_variance, dtype=float)
    after = lfilter([1.0 - decay], [1.0, -decay], np.square(x), axis=0, zi=decay * seed_variance[None, :])[0]
    return np.vstack([seed_variance[None, :], after])


def ewma_moments(sample: RiskSample, decay: float, include_mean: bool) -> tuple[np.ndarray, np.ndarray]:
    """Daily P&L mean and EWMA st. dev. per portfolio.

    Returns
    -------
    mu, sigma : (P,) arrays

    Notes
    -----
    ``vᵀΣv`` with Σ = Σ_t w_t r_t r_tᵀ (:func:`ewma_covariance`) equals
    ``Σ_t w_t (r_t·v)²``: the weighted square of the linear P&L series
    (:func:`base.linear_pnl`), without the N × N matrix.
    """
    pnl = linear_pnl(sample)
    variance = np.square(pnl) @ ewma_weights(pnl.shape[1], decay)
    sigma = np.sqrt(np.clip(variance, 0.0, None))
    mu = sample.values @ np.expm1(sample.returns).mean(axis=0) if include_mean else np.zeros(len(sample.values))
    return mu, sigma


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Normal VaR and ES on the EWMA covariance forecast.

    Parameters
    ----------
    sample : RiskSample
    confidences, horizons : sequences
    options : mapping
        ``decay`` (λ, default 0.94); ``include_mean`` (bool, default False;
        the equally weighted sample mean, as in the normal method).
    seed : unused

    Notes
    -----
    ``σ_P² = vᵀΣ_{T+1}v`` with Σ from :func:`ewma_covariance` on daily simple
    returns; then ``VaR = σ_P√h z − μh`` and ``ES = σ_P√h φ(z)/(1 − c) − μh``.
    The forecast is for the next day: √h scaling ignores that volatility
    reverts to its long-run level over longer horizons.
    """
    decay = float(options.get("decay", DEFAULT_DECAY))
    include_mean = bool(options.get("include_mean", False))
    mu, sigma = ewma_moments(sample, decay, include_mean)
    var, es = normal_var_es(mu, sigma, confidences, horizons)
    weights = ewma_weights(sample.n_obs, decay)
    return RiskEstimate(
        var=var,
        es=es,
        scaling=sqrt_time_labels(horizons),
        n_obs=np.full(len(horizons), sample.n_obs),
        diagnostics={
            "decay": decay,
            "include_mean": include_mean,
            "seed_weight": float(decay**sample.n_obs),
            "effective_obs": float(1.0 / np.square(weights).sum()),
            "daily_sigma": sigma.tolist(),
        },
    )
