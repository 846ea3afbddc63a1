"""Delta-normal VaR and ES: first-order P&L under normal log returns.

The P&L of each portfolio is approximated by ``e'r`` with ``e`` the
first-order exposures (``RiskSample.exposures``; the holdings' values for a
linear book) and ``r ~ N(hμ, hΣ)`` with ``Σ`` the window covariance of daily
log returns. Options enter only through their delta-equivalents, so books
with large gamma (a straddle, a short put) are badly measured: that is the
point of reporting this method beside full revaluation.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.special import ndtri

from tailtrace.errors import ConfigError
from tailtrace.options.pricing import horizon_calendar_days

from .base import SCALING_NONE, SCALING_SQRT_TIME, RiskEstimate, RiskSample

__all__ = ["DEFAULTS", "ParametricInputs", "parametric_inputs", "gamma_blocks", "check_options", "estimate"]

DEFAULTS: Mapping[str, Any] = {"include_mean": False, "include_theta": False}
_SQRT_2PI = np.sqrt(2.0 * np.pi)


@dataclass(frozen=True)
class ParametricInputs:
    """Checked inputs shared by the parametric (Taylor-expansion) methods.

    Attributes
    ----------
    confidences : (C,) float
    horizons : (H,) int
    z : (C,) float
        Standard normal quantile ``Φ⁻¹(c)`` (positive for c > 0.5).
    mean : (N,) float
        Window mean of daily log returns.
    cov : (N, N) float
        Window covariance of daily log returns (ddof = 1).
    exposures : (P, N) float
    gammas : (P, N, N) float or None
        As given with the sample; None for a linear book, whose gammas are
        ``diag(values)`` (see :func:`gamma_blocks`): a dense (P, N, N) array
        would take P·N²·8 bytes (1.6 GB for 50 books of 2,000 instruments).
    thetas : (P,) float
        Base-currency P&L per calendar day of ageing (zeros if absent).
    source : str
        ``"sample"`` when exposures came with the sample, ``"linear"`` when
        derived from ``values`` (exposures = values, gammas = diag(values)).
    scaling : tuple of str
    n_obs : (H,) int
    """

    confidences: np.ndarray
    horizons: np.ndarray
    z: np.ndarray
    mean: np.ndarray
    cov: np.ndarray
    exposures: np.ndarray
    gammas: np.ndarray | None
    thetas: np.ndarray
    source: str
    scaling: tuple[str, ...]
    n_obs: np.ndarray


def gamma_blocks(x: ParametricInputs) -> list[tuple[np.ndarray, np.ndarray]]:
    """Each portfolio's gamma matrix on the instruments where it is not zero.

    Returns
    -------
    list of (idx, G), one per portfolio
        ``idx`` (k,) column indices and ``G`` (k, k) the symmetric part of
        ``Γ[idx][:, idx]``; outside ``idx`` the portfolio's Γ is zero. A linear
        book has ``G = diag(values[idx])`` on the instruments it holds.
    """
    if x.gammas is None:
        return [(idx, np.diag(v[idx])) for v in x.exposures for idx in [np.flatnonzero(v)]]
    blocks = []
    for g in x.gammas:  # one portfolio at a time: the dense stack is already (P, N, N)
        nonzero = g != 0
        idx = np.flatnonzero(nonzero.any(axis=0) | nonzero.any(axis=1))
        block = g[np.ix_(idx, idx)]
        blocks.append((idx, 0.5 * (block + block.T)))
    return blocks


def check_options(options: Mapping[str, Any] | None, defaults: Mapping[str, Any], method: str) -> dict[str, Any]:
    """Merge boolean ``options`` over ``defaults``; reject unknown keys (ConfigError)."""
    given = dict(options or {})
    unknown = sorted(set(given) - set(defaults))
    if unknown:
        raise ConfigError(f"{method}: unknown option(s) {unknown}; known: {sorted(defaults)}")
    merged = {**defaults, **given}
    for key, value in merged.items():
        if not isinstance(value, bool):
            raise ConfigError(f"{method}: option '{key}' must be true or false, got {value!r}")
    return merged


def parametric_inputs(sample: RiskSample, confidences: Sequence[float], horizons: Sequence[int]) -> ParametricInputs:
    """Check the grid and gather moments and sensitivities of a sample.

    Parameters
    ----------
    sample : RiskSample
    confidences : sequence of float
        Each in (0, 1).
    horizons : sequence of int
        Trading days, each >= 1.

    Returns
    -------
    ParametricInputs

    Raises
    ------
    ValueError
        Bad confidences or horizons, fewer than two window returns, or
        ``exposures`` given without ``gammas`` (or the reverse).
    """
    c = np.asarray(confidences, dtype=np.float64)
    h = np.asarray(horizons)
    if c.ndim != 1 or c.size == 0 or np.any((c <= 0) | (c >= 1)):
        raise ValueError(f"confidences must lie in (0, 1), got {confidences!r}")
    if h.ndim != 1 or h.size == 0 or not np.issubdtype(h.dtype, np.integer) or np.any(h < 1):
        raise ValueError(f"horizons must be integers >= 1, got {horizons!r}")
    returns = np.asarray(sample.returns, dtype=np.float64)
    if returns.shape[0] < 2:
        raise ValueError("at least two window returns are needed for a covariance")
    if (sample.exposures is None) != (sample.gammas is None):
        raise ValueError("RiskSample.exposures and RiskSample.gammas must be given together")
    values = np.asarray(sample.values, dtype=np.float64)
    if sample.exposures is None:
        exposures, gammas, source = values, None, "linear"
    else:
        exposures = np.asarray(sample.exposures, dtype=np.float64)
        gammas = np.asarray(sample.gammas, dtype=np.float64)
        source = "sample"
    thetas = np.zeros(exposures.shape[0]) if sample.thetas is None else np.asarray(sample.thetas, dtype=np.float64)
    cov = np.atleast_2d(np.cov(returns, rowvar=False, ddof=1))
    return ParametricInputs(
        confidences=c, horizons=h.astype(np.int64), z=ndtri(c), mean=returns.mean(axis=0), cov=cov,
        exposures=exposures, gammas=gammas, thetas=thetas, source=source,
        scaling=tuple(SCALING_NONE if k == 1 else SCALING_SQRT_TIME for k in h),
        n_obs=np.full(h.size, returns.shape[0], dtype=np.int64),
    )


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Delta-normal VaR and ES.

    Parameters
    ----------
    sample : RiskSample
        Uses ``returns`` (window), ``exposures`` (or ``values``) and, when
        asked, ``thetas``.
    confidences : sequence of float
    horizons : sequence of int
    options : mapping, optional
        ``include_mean`` (default False): add the window mean drift;
        ``include_theta`` (default False): add the options' time decay over
        ``h * 7/5`` calendar days.
    seed : ignored
        Deterministic method; accepted for the common signature.

    Returns
    -------
    RiskEstimate
        ``scaling`` is ``none`` for h = 1 and ``sqrt_time`` otherwise.

    Notes
    -----
    ``σ_p = sqrt(e'Σe)``, ``m = h μ'e + θ d(h)`` (each term only when
    enabled), ``VaR = z_c σ_p √h - m``, ``ES = σ_p √h φ(z_c)/(1 - c) - m``.

    References
    ----------
    the 1996 industry technical document on EWMA volatility, as discussed in Hull, *Risk Management and
    Financial Institutions*, volatility chapter;
    Jorion, *Value at Risk*, 3rd ed. (2007), ch. on VaR methods; Hull, *Risk
    Management and Financial Institutions*, model-building chapter.
    """
    opts = check_options(options, DEFAULTS, "delta_normal")
    x = parametric_inputs(sample, confidences, horizons)
    sigma = np.sqrt(np.maximum(np.einsum("pi,pi->p", x.exposures @ x.cov, x.exposures), 0.0))  # e'Σe by BLAS
    h = x.horizons.astype(np.float64)
    drift = np.zeros((sigma.size, h.size))
    if opts["include_mean"]:
        drift += np.outer(x.exposures @ x.mean, h)
    if opts["include_theta"]:
        drift += np.outer(x.thetas, horizon_calendar_days(h))
    scale = sigma[:, None, None] * np.sqrt(h)[None, None, :]
    es_factor = np.exp(-0.5 * x.z ** 2) / _SQRT_2PI / (1.0 - x.confidences)
    var = x.z[None, :, None] * scale - drift[:, None, :]
    es = es_factor[None, :, None] * scale - drift[:, None, :]
    diagnostics = {
        "method": "delta_normal",
        "covariance": "window sample covariance of daily log returns, ddof=1",
        "sensitivities": x.source,
        "include_mean": opts["include_mean"],
        "include_theta": opts["include_theta"],
        "daily_sigma": sigma.tolist(),
    }
    return RiskEstimate(var=var, es=es, scaling=x.scaling, n_obs=x.n_obs, diagnostics=diagnostics)
