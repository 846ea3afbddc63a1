"""Expected-shortfall backtest: the Acerbi-Szekely (2014) Z2 statistic.

Z2 compares the realised losses beyond VaR with the forecast ES. Its
distribution under a correct model depends a little on the tail, so the
published thresholds are used for the case they were published for
(T = 250, alpha = 2.5%) and, for any other case, thresholds from the exact
null distribution of Z2 under normality (computed by FFT, no simulation
noise; see :func:`z2_null_distribution`).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.special import ndtr, ndtri

from .zones import GREEN, RED, YELLOW

__all__ = [
    "Z2Thresholds",
    "PUBLISHED_Z2",
    "acerbi_szekely_z2",
    "z2_null_distribution",
    "z2_thresholds",
    "z2_p_value",
    "z2_zone",
]

# Acerbi & Szekely (2014): yellow at the 5% level, red at 0.01%, T = 250, alpha = 2.5%.
PUBLISHED_Z2 = {"n_obs": 250, "alpha": 0.025, "yellow": -0.70, "red": -1.8}
YELLOW_LEVEL = 0.05
RED_LEVEL = 0.0001
_POINTS_PER_SD = 300  # lattice step: sd of one day's tail term / 300
_WIDTH_SD = 15.0  # lattice reaches 15 sd of the sum below its mean


@dataclass(frozen=True)
class Z2Thresholds:
    """Zone thresholds of Z2: yellow when Z2 <= yellow, red when Z2 <= red.

    Attributes
    ----------
    n_obs : int
    alpha : float
        Tail probability ``1 - confidence``.
    yellow, red : float
    source : str
        "published" (Acerbi & Szekely 2014) or "normal_null"
        (:func:`z2_null_distribution`).
    """

    n_obs: int
    alpha: float
    yellow: float
    red: float
    source: str


def acerbi_szekely_z2(pnl: np.ndarray, var: np.ndarray, es: np.ndarray, coverage: np.ndarray) -> np.ndarray:
    """Z2 statistic of an ES forecast series.

    Parameters
    ----------
    pnl : array_like, shape (..., T)
        Realised P&L X_t (profit positive).
    var, es : array_like
        Broadcast together with ``pnl``.
        VaR and ES forecasts as positive loss amounts.
    coverage : array_like
        Confidence level, broadcastable to ``pnl.shape[:-1]``.

    Returns
    -------
    numpy.ndarray, shape (...)
        ``Z2 = sum_t X_t I_t / (T alpha ES_t) + 1``, ``I_t = 1{X_t < -VaR_t}``,
        ``alpha = 1 - coverage``. E[Z2] = 0 under a correct model; negative
        values mean the ES is too small. An exception on a day with ES <= 0
        gives -inf (the forecast claimed no tail at all).

    References
    ----------
    Acerbi, C. and Szekely, B. (2014). Backtesting expected shortfall.
    Risk, December 2014.
    """
    x, var_b, es_b = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (pnl, var, es)))
    hit = x < -var_b
    ratio = np.divide(x, es_b, out=np.zeros(x.shape), where=hit & (es_b > 0))
    ratio[hit & (es_b <= 0)] = -np.inf
    alpha = 1.0 - np.asarray(coverage, dtype=float)
    return ratio.sum(axis=-1) / (x.shape[-1] * alpha) + 1.0


@lru_cache(maxsize=32)
def _null_cached(n_obs: int, alpha: float) -> tuple[np.ndarray, np.ndarray]:
    q = float(ndtri(alpha))  # left-tail quantile, negative
    phi = float(np.exp(-0.5 * q * q) / np.sqrt(2 * np.pi))
    mean_y, var_y = -phi, alpha - q * phi - phi * phi
    h = np.sqrt(var_y) / _POINTS_PER_SD
    lower = n_obs * mean_y - _WIDTH_SD * np.sqrt(n_obs * var_y) - 10 * np.sqrt(var_y)
    size = 1 << int(np.ceil(np.log2(-lower / h + 2)))
    j = np.arange(size)
    # One day's term Y = X 1{X < q} on the lattice -j h: the atom 1 - alpha at 0 and the
    # normal tail mass of each cell below q.
    cell_hi = np.minimum(-(j - 0.5) * h, q)
    cell_lo = -(j + 0.5) * h
    pmf = np.where(cell_lo < q, ndtr(cell_hi) - ndtr(cell_lo), 0.0)
    pmf[0] += 1.0 - alpha
    total = np.clip(np.fft.irfft(np.fft.rfft(pmf) ** n_obs, size), 0.0, None)  # n-fold convolution
    cdf = np.cumsum(total[::-1])  # ascending sum S = -j h
    z = 1.0 + (-j[::-1] * h) / (n_obs * phi)  # Z2 = 1 + S / (T alpha ES), alpha ES = phi(q)
    z.setflags(write=False)
    cdf.setflags(write=False)
    return z, cdf


def z2_null_distribution(n_obs: int, alpha: float) -> tuple[np.ndarray, np.ndarray]:
    """Null distribution of Z2 when the forecasts are those of the true normal model.

    Parameters
    ----------
    n_obs : int
        Backtest length T.
    alpha : float
        Tail probability ``1 - confidence``.

    Returns
    -------
    z, cdf : read-only arrays
        Lattice of Z2 values (ascending) and ``P(Z2 <= z)``.

    Notes
    -----
    ``Z2 - 1 = S / (T phi(q))`` with ``S = sum_t Y_t``, ``Y_t = X_t 1{X_t < q}``
    iid, ``X ~ N(0, 1)``, ``q = Phi^-1(alpha)`` (for a correct model the scale
    cancels). Y has an atom ``1 - alpha`` at 0 and density ``phi`` below q. Its
    probabilities on a lattice of step ``sd(Y)/300`` are convolved T times at once
    through the FFT (``irfft(rfft(p)^T)``); the lattice extends 15 standard
    deviations of S below its mean, so wrap-around is below 1e-40. Accuracy
    about 3e-5 in Z2 (halving the step moves the 250-day thresholds by less).
    """
    n, a = int(n_obs), float(np.round(alpha, 12))
    if n < 1 or not 0 < a < 1:
        raise ValueError(f"need n_obs >= 1 and 0 < alpha < 1; got {n_obs}, {alpha}")
    return _null_cached(n, a)


def z2_thresholds(n_obs: int, alpha: float, *, source: str = "auto") -> Z2Thresholds:
    """Yellow and red thresholds of Z2.

    Parameters
    ----------
    n_obs : int
        Backtest length T.
    alpha : float
        Tail probability ``1 - confidence``.
    source : {"auto", "published", "normal_null"}
        "auto" uses the published values for T = 250 and alpha = 2.5% and the
        normal null distribution otherwise.

    Returns
    -------
    Z2Thresholds

    Notes
    -----
    Thresholds are the 5% and 0.01% quantiles of Z2 under the null, the
    levels of the published values and of the VaR traffic light, read from
    :func:`z2_null_distribution`. At T = 250, alpha = 2.5% they are -0.7005
    and -1.793 (published: -0.70 and -1.8).

    References
    ----------
    Acerbi, C. and Szekely, B. (2014). Backtesting expected shortfall.
    Risk, December 2014.
    """
    a = float(np.round(alpha, 12))
    is_published = int(n_obs) == PUBLISHED_Z2["n_obs"] and abs(a - PUBLISHED_Z2["alpha"]) < 1e-12
    if source not in ("auto", "published", "normal_null"):
        raise ValueError(f"unknown Z2 threshold source {source!r}")
    if source == "published" and not is_published:
        raise ValueError(
            f"published Z2 thresholds exist only for T = 250 and alpha = 2.5%, not T = {n_obs}, alpha = {alpha}"
        )
    if source == "published" or (source == "auto" and is_published):
        return Z2Thresholds(int(n_obs), a, PUBLISHED_Z2["yellow"], PUBLISHED_Z2["red"], "published")
    z, cdf = z2_null_distribution(n_obs, a)
    yellow, red = np.interp([YELLOW_LEVEL, RED_LEVEL], cdf, z)
    return Z2Thresholds(int(n_obs), a, float(yellow), float(red), "normal_null")


def z2_p_value(z2: np.ndarray, n_obs: int, alpha: float) -> np.ndarray:
    """One-sided p-value ``P(Z2_null <= z2)`` under a correct normal model.

    Parameters
    ----------
    z2 : array_like
    n_obs : int
    alpha : float

    Returns
    -------
    numpy.ndarray
        From :func:`z2_null_distribution`, interpolated on its lattice
        (0 for -inf).
    """
    z, cdf = z2_null_distribution(n_obs, alpha)
    return np.interp(np.asarray(z2, dtype=float), z, cdf, left=0.0, right=1.0)


def z2_zone(z2: np.ndarray, thresholds: Z2Thresholds) -> np.ndarray:
    """Zone of Z2 values: red if ``Z2 <= red``, yellow if ``<= yellow``, else green."""
    z = np.asarray(z2, dtype=float)
    out = np.full(z.shape, GREEN, dtype=object)
    out[z <= thresholds.yellow] = YELLOW
    out[z <= thresholds.red] = RED
    return out
