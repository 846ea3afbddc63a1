"""Parametric Student-t VaR and ES with degrees of freedom fitted by maximum likelihood."""

from __future__ import annotations

import warnings
from typing import Any, Mapping, Sequence

import numpy as np
from scipy.special import gammaln, polygamma, stdtrit

from ..errors import ConvergenceWarning
from .base import RiskEstimate, RiskSample
from .parametric import portfolio_moments
from .scaling import location_scale_var_es, sqrt_time_labels

__all__ = [
    "DOF_BOUNDS",
    "t_loglik",
    "fit_t_dof",
    "portfolio_dof",
    "t_factors",
    "t_factor_slopes",
    "dof_gradient",
    "standardised_pnl",
    "estimate",
]

DOF_BOUNDS = (2.1, 200.0)
_GRID = 48


def t_loglik(nu: np.ndarray, sq: np.ndarray, dim: int = 1) -> np.ndarray:
    """Mean log-likelihood of unit-covariance Student-t observations.

    Parameters
    ----------
    nu : (...,) array
        Degrees of freedom (> 2).
    sq : (..., T) array
        Squared Mahalanobis distances ``xᵀΣ⁻¹x`` of standardised
        observations (``x²`` in one dimension), Σ their covariance.
    dim : int
        Dimension d of each observation.

    Returns
    -------
    (...,) array, ν-dependent part of the mean log density.

    Notes
    -----
    A d-variate t with ν dof and covariance Σ has scale matrix
    ``Σ(ν − 2)/ν``, so up to terms free of ν
    ``log f = lnΓ((ν+d)/2) − lnΓ(ν/2) − (d/2) ln(π(ν − 2))
    − ((ν + d)/2) ln(1 + D²/(ν − 2))``.
    """
    nu = np.asarray(nu, dtype=float)
    const = gammaln((nu + dim) / 2) - gammaln(nu / 2) - 0.5 * dim * np.log(np.pi * (nu - 2))
    return const - 0.5 * (nu + dim) * np.log1p(sq / (nu[..., None] - 2)).mean(axis=-1)


def fit_t_dof(
    sq: np.ndarray, dim: int = 1, bounds: Sequence[float] = DOF_BOUNDS
) -> tuple[np.ndarray, np.ndarray]:
    """Maximum-likelihood degrees of freedom, one per row of ``sq``.

    Parameters
    ----------
    sq : (P, T) array
        Squared standardised distances (see :func:`t_loglik`).
    dim : int
    bounds : (low, high)
        Search interval for ν (default 2.1 to 200).

    Returns
    -------
    nu : (P,) array
    fitted : (P,) bool
        False where the optimiser failed and the kurtosis estimate was used:
        ``ν = 4 + 2/(κ − 1)`` with Mardia's ratio ``κ = E[D⁴]/(d(d + 2))``,
        which is ``4 + 6/K`` in one dimension (K the excess kurtosis), and
        the upper bound when κ ≤ 1; a ConvergenceWarning says so.

    Notes
    -----
    Location and covariance are fixed at their sample values, so the
    likelihood is profiled over ν alone. It is evaluated on a grid in
    ``log(ν − 2)`` for all rows at once; the best interior grid point and its
    neighbours form a bracket refined by
    :func:`scipy.optimize.elementwise.find_minimum`. A maximum on the grid
    edge is taken as the bound (e.g. ν = 200 for near-normal data).
    """
    from scipy.optimize.elementwise import find_minimum

    sq = np.atleast_2d(np.asarray(sq, dtype=float))
    low, high = float(bounds[0]), float(bounds[1])
    if not 2.0 < low < high:
        raise ValueError(f"dof bounds must satisfy 2 < low < high, got {bounds}")
    grid = np.linspace(np.log(low - 2), np.log(high - 2), _GRID)
    values = np.stack([t_loglik(np.full(len(sq), 2 + np.exp(u)), sq, dim) for u in grid], axis=-1)
    fitted = np.all(np.isfinite(values), axis=-1)
    best = np.argmax(np.where(np.isfinite(values), values, -np.inf), axis=-1)
    nu = 2 + np.exp(grid[best])
    inner = fitted & (best > 0) & (best < _GRID - 1)
    if inner.any():
        rows = np.flatnonzero(inner)
        b = best[rows]
        res = find_minimum(
            lambda u, r: -t_loglik(2 + np.exp(u), sq[r.astype(int)], dim),
            (grid[b - 1], grid[b], grid[b + 1]),
            args=(rows.astype(float),),
        )
        ok = np.asarray(res.success) & np.isfinite(res.x)
        nu[rows[ok]] = 2 + np.exp(res.x[ok])
        fitted[rows[~ok]] = False
    if not fitted.all():
        bad = np.flatnonzero(~fitted)
        nu[bad] = _moment_dof(sq[bad], dim, low, high)
        warnings.warn(
            f"Student-t dof fit failed for rows {bad.tolist()}; used the kurtosis estimate",
            ConvergenceWarning,
            stacklevel=2,
        )
    return np.clip(nu, low, high), fitted


def _moment_dof(sq: np.ndarray, dim: int, low: float, high: float) -> np.ndarray:
    # Mardia kurtosis ratio κ = E[D⁴]/(d(d+2)E[D²/d]²) of a t is (ν − 2)/(ν − 4)
    m2 = np.nanmean(sq, axis=-1) / dim
    m4 = np.nanmean(np.square(sq), axis=-1) / (dim * (dim + 2))
    with np.errstate(divide="ignore", invalid="ignore"):
        excess = m4 / np.square(m2) - 1.0
        nu = np.where(excess > 0, 4.0 + 2.0 / excess, high)
    return np.clip(np.nan_to_num(nu, nan=high), low, high)


def t_factors(nu: np.ndarray, confidences: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    """VaR and ES of a unit-variance Student-t, shape ``(P, C)``.

    Notes
    -----
    With ``q = t_ν⁻¹(c)`` and ``f_ν`` the standard t density,
    ``ES = ((ν + q²)/(ν − 1)) f_ν(q)/(1 − c)``; both are multiplied by
    ``√((ν − 2)/ν)`` to give unit variance.

    References
    ----------
    McNeil, Frey & Embrechts, *Quantitative Risk Management*, 2005,
    example 2.19 (ES of the Student-t).
    """
    nu = np.asarray(nu, dtype=float)[:, None]
    c = np.asarray(confidences, dtype=float)[None, :]
    q = stdtrit(nu, c)
    log_density = (
        gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(nu * np.pi) - 0.5 * (nu + 1) * np.log1p(q**2 / nu)
    )
    es = (nu + q**2) / (nu - 1) * np.exp(log_density) / (1 - c)
    unit = np.sqrt((nu - 2) / nu)
    return q * unit, es * unit


def portfolio_dof(
    pnl: np.ndarray, bounds: Sequence[float] = DOF_BOUNDS
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """ν fitted to each row's standardised P&L (see :func:`fit_t_dof`).

    Returns
    -------
    nu : (P,) array (the upper bound for constant rows)
    fitted : (P,) bool, False where the kurtosis fallback was used
    degenerate : (P,) bool, True where the P&L is constant
    """
    z, degenerate = standardised_pnl(pnl)
    nu = np.full(len(z), float(bounds[1]))
    fitted = np.ones(len(z), dtype=bool)
    if (~degenerate).any():
        nu[~degenerate], fitted[~degenerate] = fit_t_dof(np.square(z[~degenerate]), 1, bounds)
    return nu, fitted, degenerate


def t_factor_slopes(nu: np.ndarray, confidences: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    """∂/∂ν of the unit-variance factors of :func:`t_factors`, ``(P, C)`` (central differences)."""
    nu = np.asarray(nu, dtype=float)
    step = 1e-5 * nu
    up_var, up_es = t_factors(nu + step, confidences)
    dn_var, dn_es = t_factors(nu - step, confidences)
    return (up_var - dn_var) / (2 * step[:, None]), (up_es - dn_es) / (2 * step[:, None])


def dof_gradient(simple: np.ndarray, values: np.ndarray, nu: np.ndarray) -> np.ndarray:
    """Gradient ∂ν/∂v of the fitted dof of linear books, by implicit differentiation.

    Parameters
    ----------
    simple : (T, N) daily simple returns
    values : (P, N) holdings
    nu : (P,) interior maxima of the profile likelihood for these books

    Returns
    -------
    (P, N) array; rows with constant P&L are zero.

    Notes
    -----
    At the optimum ``∂ℓ/∂ν = 0``, so ``∂ν/∂v = −(∂²ℓ/∂ν∂v)/(∂²ℓ/∂ν²)``. With
    ``z_t² = y_t²/s²``, ``y = X̃v``, u = ν − 2 and ℓ the mean log-likelihood
    of :func:`t_loglik`: ``∂²ℓ/∂ν∂z_t² = −(z_t² − 3)/(2T(u + z_t²)²)`` and
    ``∂²ℓ/∂ν² = ¼ψ′((ν+1)/2) − ¼ψ′(ν/2) + 1/(2u²) − A′ − ((ν+1)/2)A″`` where
    ``A = mean log(1 + z²/u)``. ν is homogeneous of degree 0 in v, so
    ``Σ v_i ∂ν/∂v_i = 0``.
    """
    centred = simple - simple.mean(axis=0)
    y = values @ centred.T  # (P, T)
    T = y.shape[1]
    s2 = np.square(y).sum(axis=1) / (T - 1)
    ok = s2 > 0
    s2 = np.where(ok, s2, 1.0)[:, None]
    z2 = np.square(y) / s2
    u = (np.asarray(nu, dtype=float) - 2.0)[:, None]
    mixed = -(z2 - 3.0) / (2 * T * np.square(u + z2))  # ∂²ℓ/∂ν∂z_t²
    ds2 = 2 * (y @ centred) / (T - 1)  # ∂s²/∂v, (P, N)
    cross = 2 * (mixed * y) @ centred / s2 - (mixed * np.square(y)).sum(axis=1, keepdims=True) * ds2 / np.square(s2)
    nu_c = u + 2.0
    a1 = np.mean(1 / (u + z2), axis=1, keepdims=True) - 1 / u
    a2 = -np.mean(1 / np.square(u + z2), axis=1, keepdims=True) + 1 / np.square(u)
    trigamma = 0.25 * (polygamma(1, (nu_c + 1) / 2) - polygamma(1, nu_c / 2))
    curvature = trigamma + 0.5 / np.square(u) - a1 - (nu_c + 1) / 2 * a2
    return np.where(ok[:, None], -cross / curvature, 0.0)


def standardised_pnl(pnl: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P&L minus its mean over its st. dev. (ddof 1); rows with zero spread stay zero.

    Returns
    -------
    z : (P, T) array
    degenerate : (P,) bool, True where the P&L is constant
    """
    centred = pnl - pnl.mean(axis=-1, keepdims=True)
    sd = pnl.std(axis=-1, ddof=1, keepdims=True)
    degenerate = sd[:, 0] <= 1e-14 * np.maximum(np.abs(pnl).max(axis=-1), 1e-300)
    z = np.divide(centred, sd, out=np.zeros_like(centred), where=~degenerate[:, None])
    return z, degenerate


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Student-t VaR and ES of each portfolio's P&L.

    Parameters
    ----------
    sample : RiskSample
    confidences, horizons : sequences
    options : mapping
        ``include_mean`` (bool, default False); ``dof_bounds`` (pair,
        default [2.1, 200]).
    seed : unused

    Notes
    -----
    ν is fitted by maximum likelihood to each portfolio's standardised 1-day
    P&L (:func:`fit_t_dof`); σ and μ are those of the normal method
    (:func:`parametric.portfolio_moments`), so the t has the sample variance.
    ``VaR = σ√h · q̃_ν(c) − μh`` and ``ES = σ√h · ẽ_ν(c) − μh`` with the
    unit-variance factors of :func:`t_factors`. A sum of h daily t variables
    is not t-distributed: √h scaling overstates the h-day tail somewhat.

    References
    ----------
    Jorion, *Value at Risk*, 3rd ed., 2007, ch. 4 (fat tails); McNeil, Frey &
    Embrechts, *Quantitative Risk Management*, 2005, section 2.2.
    """
    include_mean = bool(options.get("include_mean", False))
    bounds = tuple(float(b) for b in options.get("dof_bounds", DOF_BOUNDS))
    mu, sigma, _ = portfolio_moments(sample, include_mean, covariance=False)
    nu, fitted, degenerate = portfolio_dof(sample.pnl, bounds)
    var, es = location_scale_var_es(mu, sigma, *t_factors(nu, confidences), horizons)
    return RiskEstimate(
        var=var,
        es=es,
        scaling=sqrt_time_labels(horizons),
        n_obs=np.full(len(horizons), sample.n_obs),
        diagnostics={
            "include_mean": include_mean,
            "dof": [None if d else float(v) for v, d in zip(nu, degenerate)],
            "dof_fitted": [bool(f) for f in fitted],
            "dof_bounds": list(bounds),
            "daily_sigma": sigma.tolist(),
        },
    )
