"""Cornish-Fisher quantile, its tail mean, and the check that it is monotone."""

from __future__ import annotations

import numpy as np

__all__ = ["cf_quantile", "cf_tail_mean", "cf_tail_monotone"]


def cf_quantile(z: np.ndarray, skew: np.ndarray, exkurt: np.ndarray) -> np.ndarray:
    """Cornish-Fisher adjusted standard quantile.

    Parameters
    ----------
    z : array_like
        Standard normal quantile (left tail: negative).
    skew, exkurt : array_like
        Skewness S and excess kurtosis K.

    Returns
    -------
    numpy.ndarray
        ``z + (z^2 - 1) S/6 + (z^3 - 3z) K/24 - (2z^3 - 5z) S^2/36``.

    References
    ----------
    Zangari, P. (1996). A VaR methodology for portfolios that include
    options. RiskMetrics Monitor, first quarter 1996.
    """
    z, s, k = (np.asarray(a, dtype=float) for a in (z, skew, exkurt))
    return z + (z * z - 1) * s / 6 + (z**3 - 3 * z) * k / 24 - (2 * z**3 - 5 * z) * s * s / 36


def cf_tail_mean(q: np.ndarray, alpha: np.ndarray, skew: np.ndarray, exkurt: np.ndarray) -> np.ndarray:
    """Mean of the Cornish-Fisher quantile over the left tail of mass alpha.

    Parameters
    ----------
    q : array_like
        ``Phi^-1(alpha)`` (negative).
    alpha : array_like
        Tail probability ``1 - c``.
    skew, exkurt : array_like

    Returns
    -------
    numpy.ndarray
        ``(1/alpha) int_0^alpha z_CF(Phi^-1(u)) du``; the ES of the
        standardised variable is minus this value.

    Notes
    -----
    With ``m_k = int_{-inf}^q z^k phi(z) dz``: ``m0 = alpha``,
    ``m1 = -phi(q)``, ``m2 = alpha - q phi(q)``, ``m3 = -(q^2 + 2) phi(q)``,
    the integral is ``m1 + S/6 (m2 - m0) + K/24 (m3 - 3 m1)
    - S^2/36 (2 m3 - 5 m1)``. Exact for the distribution whose quantile
    function is the expansion, which is meaningful only where the expansion
    is monotone (:func:`cf_tail_monotone`).
    """
    q, a, s, k = (np.asarray(v, dtype=float) for v in (q, alpha, skew, exkurt))
    phi = np.exp(-0.5 * q * q) / np.sqrt(2 * np.pi)
    m0, m1, m2, m3 = a, -phi, a - q * phi, -(q * q + 2) * phi
    total = m1 + s / 6 * (m2 - m0) + k / 24 * (m3 - 3 * m1) - s * s / 36 * (2 * m3 - 5 * m1)
    return total / a


def cf_tail_monotone(q: np.ndarray, skew: np.ndarray, exkurt: np.ndarray) -> np.ndarray:
    """True where the expansion increases over the whole left tail ``z <= q``.

    Parameters
    ----------
    q : array_like
        Left-tail normal quantile at the VaR level (negative).
    skew, exkurt : array_like

    Returns
    -------
    numpy.ndarray of bool

    Notes
    -----
    ``dz_CF/dz = a z^2 + b z + c`` with ``a = K/8 - S^2/6``, ``b = S/3``,
    ``c = 1 - K/8 + 5 S^2/36``. On ``(-inf, q]`` it stays positive iff
    ``a > 0`` and its minimum there (at the vertex ``-b/(2a)`` if that lies
    below q, else at q) is positive, or ``a = 0``, ``b <= 0`` and the value
    at q (or c when b = 0) is positive. With ``a < 0`` the expansion turns
    back somewhere in the far tail and does not define a distribution.
    """
    q, s, k = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (q, skew, exkurt)))
    a = k / 8 - s * s / 6
    b = s / 3
    c = 1 - k / 8 + 5 * s * s / 36
    vertex = np.divide(-b, 2 * a, out=np.zeros(a.shape), where=a > 0)
    at = np.where(vertex <= q, vertex, q)
    min_pos = a * at * at + b * at + c
    flat = np.where(b < 0, b * q + c, c)  # a == 0: linear slope
    return np.where(a > 0, min_pos > 0, (a == 0) & (b <= 0) & (flat > 0))
