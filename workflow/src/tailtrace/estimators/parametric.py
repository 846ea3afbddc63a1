"""Parametric normal VaR and ES (variance-covariance method)."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
from scipy.special import ndtri

from .base import SCALING_NONE, SCALING_SQRT_TIME, RiskEstimate, RiskSample, linear_pnl

__all__ = ["estimate", "normal_var_es", "portfolio_moments"]


def normal_var_es(
    mu: np.ndarray, sigma: np.ndarray, confidences: Sequence[float], horizons: Sequence[int]
) -> tuple[np.ndarray, np.ndarray]:
    """Normal VaR and ES of a P&L with daily mean ``mu`` and st. dev. ``sigma``.

    Parameters
    ----------
    mu, sigma : (P,) arrays
        Daily P&L mean and standard deviation.
    confidences, horizons : sequences

    Returns
    -------
    var, es : (P, C, H) arrays

    Notes
    -----
    With z = Φ⁻¹(c) and h the horizon in days, square-root-of-time scaling
    gives ``VaR = σ√h z − μh`` and ``ES = σ√h φ(z)/(1 − c) − μh``.
    """
    c = np.asarray(confidences, dtype=float)
    h = np.asarray(horizons, dtype=float)
    z = ndtri(c)
    es_factor = np.exp(-0.5 * z**2) / np.sqrt(2 * np.pi) / (1 - c)
    sig = np.asarray(sigma, float)[:, None, None] * np.sqrt(h)[None, None, :]
    drift = np.asarray(mu, float)[:, None, None] * h[None, None, :]
    var = sig * z[None, :, None] - drift
    es = sig * es_factor[None, :, None] - drift
    return var, es


def portfolio_moments(
    sample: RiskSample, include_mean: bool, *, covariance: bool = True
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Daily P&L mean and st. dev. per portfolio from the simple-return covariance.

    Parameters
    ----------
    sample : RiskSample
    include_mean : bool
        Return the window mean P&L as ``mu`` (else zeros).
    covariance : bool, default True
        Also return the (N, N) covariance; False skips it (it is not needed
        for ``sigma``).

    Returns
    -------
    mu, sigma : (P,) arrays
    cov : (N, N) sample covariance of simple returns (ddof = 1), or None

    Notes
    -----
    σ_P² = vᵀΣv is computed as the ddof = 1 variance of the linear P&L
    series ``R v`` (R the T × N simple returns; :func:`base.linear_pnl`,
    which a linear book already holds): the same number, in O(T·N·P) or
    less instead of O(N²·(T + P)).
    """
    values = sample.values
    variance = linear_pnl(sample).var(axis=1, ddof=1)
    sigma = np.sqrt(np.clip(variance, 0.0, None))
    simple = np.expm1(sample.returns) if include_mean or covariance else None
    mu = values @ simple.mean(axis=0) if include_mean else np.zeros(len(values))
    cov = np.atleast_2d(np.cov(simple, rowvar=False, ddof=1)) if covariance else None
    return mu, sigma, cov


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Parametric normal VaR and ES of a linear book.

    Parameters
    ----------
    sample : RiskSample
    confidences, horizons : sequences
    options : mapping
        ``include_mean`` (bool, default False): subtract the sample mean P&L.
    seed : unused

    Notes
    -----
    σ_P² = vᵀΣv with Σ the sample covariance of daily simple returns and v the
    base-currency holdings, so σ_P equals the st. dev. of the 1-day P&L.
    The mean is excluded by default: over short horizons the sample mean is
    dominated by noise and a positive drift would lower the reported risk.

    References
    ----------
    Jorion, *Value at Risk*, 3rd ed., 2007, ch. 7; Hull, *Options, Futures,
    and Other Derivatives*, VaR chapter (model-building approach).
    """
    include_mean = bool(options.get("include_mean", False))
    mu, sigma, _ = portfolio_moments(sample, include_mean, covariance=False)
    var, es = normal_var_es(mu, sigma, confidences, horizons)
    scaling = tuple(SCALING_NONE if h == 1 else SCALING_SQRT_TIME for h in horizons)
    return RiskEstimate(
        var=var,
        es=es,
        scaling=scaling,
        n_obs=np.full(len(horizons), sample.n_obs),
        diagnostics={"include_mean": include_mean, "daily_sigma": sigma.tolist(), "daily_mean": mu.tolist()},
    )
