"""Unit-variance Student-t: VaR/ES factors and a vectorised ML fit of the dof."""

from __future__ import annotations

import numpy as np
from scipy.special import gammaln, stdtrit

__all__ = ["t_factors", "t_profile_loglik", "fit_t_dof"]

_GOLDEN = (np.sqrt(5.0) - 1.0) / 2.0


def t_factors(nu: np.ndarray, confidences: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """VaR and ES of a unit-variance Student-t, per unit of standard deviation.

    Parameters
    ----------
    nu : array_like
        Degrees of freedom (> 2), broadcast against ``confidences``.
    confidences : array_like

    Returns
    -------
    var, es : numpy.ndarray

    Notes
    -----
    ``q = t_nu^-1(c)``; standard-form ES ``((nu + q^2)/(nu - 1)) f_nu(q)/(1 - c)``;
    both are multiplied by ``sqrt((nu - 2)/nu)`` for unit variance.

    References
    ----------
    McNeil, Frey and Embrechts (2005), Quantitative Risk Management,
    Example 2.18 (ES of the t distribution).
    """
    nu = np.asarray(nu, dtype=float)
    c = np.asarray(confidences, dtype=float)
    q = stdtrit(nu, c)
    log_f = (
        gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(nu * np.pi) - (nu + 1) / 2 * np.log1p(q * q / nu)
    )
    scale = np.sqrt((nu - 2) / nu)
    es = (nu + q * q) / (nu - 1) * np.exp(log_f) / (1 - c)
    return scale * q, scale * es


def t_profile_loglik(y: np.ndarray, nu: np.ndarray) -> np.ndarray:
    """Log-likelihood of standardised data under a unit-variance t.

    Parameters
    ----------
    y : (..., n) array
        Data with mean 0 and variance 1 (standardised per series).
    nu : (...) array
        Degrees of freedom (> 2).

    Returns
    -------
    (...) array
        ``sum_i log f(y_i)``, ``f(y) = Gamma((nu+1)/2) / (Gamma(nu/2)
        sqrt(pi (nu-2))) (1 + y^2/(nu-2))^(-(nu+1)/2)``.
    """
    nu = np.asarray(nu, dtype=float)
    n = y.shape[-1]
    const = gammaln((nu + 1) / 2) - gammaln(nu / 2) - 0.5 * np.log(np.pi * (nu - 2))
    return n * const - (nu + 1) / 2 * np.sum(np.log1p(y * y / (nu[..., None] - 2)), axis=-1)


def fit_t_dof(
    y: np.ndarray, *, dof_min: float = 2.5, dof_max: float = 200.0, grid: int = 24, iterations: int = 40
) -> np.ndarray:
    """Maximum-likelihood dof of many standardised samples at once.

    Parameters
    ----------
    y : (..., n) array
        Standardised samples (mean 0, variance 1), one per leading index.
    dof_min, dof_max : float
        Search bounds (dof_min > 2 so the variance exists).
    grid : int
        Points of the coarse log-spaced grid that brackets the maximum.
    iterations : int
        Golden-section steps inside the bracket (in log dof).

    Returns
    -------
    (...) array
        The dof maximising :func:`t_profile_loglik`, within the bounds.

    Notes
    -----
    The scale is tied to the sample variance (unit variance after
    standardisation), so only the dof is estimated: a profile likelihood.
    A grid search finds the bracket, golden-section search refines it;
    every step is one array operation over all samples.
    """
    if not 2.0 < dof_min < dof_max:
        raise ValueError(f"need 2 < dof_min < dof_max, got {dof_min}, {dof_max}")
    lead = y.shape[:-1]
    log_grid = np.linspace(np.log(dof_min), np.log(dof_max), grid)
    ll = np.stack([t_profile_loglik(y, np.full(lead, np.exp(g))) for g in log_grid], axis=-1)
    best = np.argmax(ll, axis=-1)
    lo = log_grid[np.maximum(best - 1, 0)]
    hi = log_grid[np.minimum(best + 1, grid - 1)]
    a = hi - _GOLDEN * (hi - lo)
    b = lo + _GOLDEN * (hi - lo)
    fa = t_profile_loglik(y, np.exp(a))
    fb = t_profile_loglik(y, np.exp(b))
    for _ in range(iterations):  # fixed steps, all samples at once
        left = fa > fb  # maximum lies in [lo, b]
        hi = np.where(left, b, hi)
        lo = np.where(left, lo, a)
        new_a = hi - _GOLDEN * (hi - lo)
        new_b = lo + _GOLDEN * (hi - lo)
        f_new = t_profile_loglik(y, np.exp(np.where(left, new_a, new_b)))
        fa, fb = np.where(left, f_new, fb), np.where(left, fa, f_new)
        a, b = np.where(left, new_a, b), np.where(left, a, new_b)
    return np.clip(np.exp((lo + hi) / 2), dof_min, dof_max)
