"""Distribution-free confidence bands for historical-type VaR.

The band rests on order statistics: for iid losses the number ``K`` of
observations above the true VaR (the c-quantile) is Binomial(n, 1 − c),
whatever the loss distribution. Two order statistics chosen from that
binomial bracket the true VaR with probability at least ``level``.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
from scipy.special import betainc

from .scaling import scale_sqrt_time
from .weighted_tail import effective_size, mass_index, worst_first

__all__ = [
    "DEFAULT_BAND_LEVEL",
    "binomial_cdf",
    "order_statistic_ranks",
    "order_statistic_band",
    "weighted_order_statistic_band",
    "sqrt_time_band",
]

DEFAULT_BAND_LEVEL = 0.90


def binomial_cdf(k: np.ndarray, n: float, p: float) -> np.ndarray:
    """``P(K ≤ k)`` for K ~ Binomial(n, p); ``n`` may be non-integer.

    Notes
    -----
    ``P(K ≤ k) = I_{1−p}(n − k, k + 1)`` (regularised incomplete beta), which
    extends the binomial to a real ``n`` (used with an effective sample size).
    """
    k = np.asarray(k, dtype=float)
    inside = k < n
    return np.where(inside, betainc(np.where(inside, n - k, 1.0), k + 1.0, 1.0 - p), 1.0)


def order_statistic_ranks(
    n: float, confidences: Sequence[float], level: float = DEFAULT_BAND_LEVEL
) -> tuple[np.ndarray, np.ndarray]:
    """Ranks (1 = worst loss) of the order statistics bounding VaR.

    Parameters
    ----------
    n : float
        Sample size (or effective sample size).
    confidences : sequence of float
        VaR confidence levels ``c``.
    level : float
        Coverage of the two-sided band, e.g. 0.90.

    Returns
    -------
    upper, lower : (C,) int arrays
        The ``upper``-th worst loss bounds VaR from above and the
        ``lower``-th worst from below. ``upper = 0`` means no order statistic
        reaches the coverage (the sample is too small for that confidence);
        ``lower = n + 1`` likewise for the lower bound.

    Notes
    -----
    With K ~ Bin(n, p), p = 1 − c, and α = 1 − level:
    ``P(VaR ≥ X_(r)) = P(K ≤ r − 1)``, so ``r`` is the largest rank with
    ``F(r − 1) ≤ α/2``; ``P(VaR < X_(s)) = P(K ≥ s)``, so ``s`` is the
    smallest rank with ``F(s − 1) ≥ 1 − α/2``. Each side misses with
    probability at most α/2 when losses are iid and continuous.

    References
    ----------
    David & Nagaraja, *Order Statistics*, 3rd ed., 2003, section 7.1
    (distribution-free confidence intervals for quantiles).
    """
    if not 0.0 < level < 1.0:
        raise ValueError(f"band level must lie in (0, 1), got {level}")
    half = (1.0 - level) / 2.0
    ks = np.arange(int(np.floor(n)) + 1, dtype=float)
    upper = np.empty(len(confidences), dtype=int)
    lower = np.empty(len(confidences), dtype=int)
    for j, c in enumerate(confidences):  # a handful of confidences, each vectorised over ranks
        cdf = binomial_cdf(ks, n, 1.0 - float(c))
        upper[j] = int(np.count_nonzero(cdf <= half + 1e-12))
        lower[j] = int(np.count_nonzero(cdf < 1.0 - half - 1e-12)) + 1
    return upper, lower


def order_statistic_band(
    losses: np.ndarray, confidences: Sequence[float], level: float = DEFAULT_BAND_LEVEL
) -> tuple[np.ndarray, np.ndarray]:
    """Distribution-free band of the empirical VaR of equally weighted losses.

    Parameters
    ----------
    losses : (..., n) array
        Loss samples (positive = loss), unsorted.
    confidences : sequence of float
    level : float
        Two-sided coverage (default 0.90).

    Returns
    -------
    lo, hi : (..., C) arrays
        Lower and upper bounds of VaR; NaN where the sample cannot reach the
        coverage (e.g. the upper bound of 99% VaR from fewer than about 300
        observations at level 0.90).

    Notes
    -----
    See :func:`order_statistic_ranks`. Assumes iid losses: overlapping or
    volatility-clustered samples give a band narrower than the truth.
    """
    losses = np.asarray(losses, dtype=float)
    n = losses.shape[-1]
    upper, lower = order_statistic_ranks(n, confidences, level)
    worst = -np.sort(-losses, axis=-1)
    padded = np.concatenate([worst, np.full(worst.shape[:-1] + (1,), np.nan)], axis=-1)
    hi = padded[..., np.where(upper >= 1, upper - 1, n)]
    lo = padded[..., np.minimum(lower - 1, n)]
    return lo, hi


def weighted_order_statistic_band(
    losses: np.ndarray,
    weights: np.ndarray,
    confidences: Sequence[float],
    level: float = DEFAULT_BAND_LEVEL,
) -> tuple[np.ndarray, np.ndarray]:
    """Approximate band of a weighted VaR from its effective sample size.

    Parameters
    ----------
    losses : (..., n) array
    weights : (n,) or (..., n) array, positive, summing to 1
    confidences : sequence of float
    level : float

    Returns
    -------
    lo, hi : (..., C) arrays (NaN where the coverage cannot be reached)

    Notes
    -----
    The weighted tail mass above the true VaR, ``Σ w_i 1{L_i > VaR}``, has
    mean ``p`` and variance ``p(1 − p)/n_eff`` with the Kish effective size
    ``n_eff = 1/Σw²``. The ranks ``r, s`` of :func:`order_statistic_ranks`
    for ``n_eff`` become tail masses ``r/n_eff`` and ``s/n_eff``, read off the
    weighted losses with the accumulation rule of the weighted VaR. Equal
    weights give exactly :func:`order_statistic_band`; otherwise the coverage
    is approximate.

    References
    ----------
    Kish, *Survey Sampling*, 1965 (effective sample size).
    """
    losses = np.asarray(losses, dtype=float)
    _, sorted_losses, sorted_w = worst_first(losses, weights)
    cumulative = np.cumsum(sorted_w, axis=-1)
    n_eff = effective_size(np.broadcast_to(weights, losses.shape))
    flat_eff = np.unique(n_eff)
    if flat_eff.size != 1:
        raise ValueError("weighted band needs the same weights for every loss row")
    upper, lower = order_statistic_ranks(float(flat_eff[0]), confidences, level)
    hi = np.take_along_axis(sorted_losses, mass_index(cumulative, np.maximum(upper, 1) / flat_eff[0]), axis=-1)
    lo = np.take_along_axis(sorted_losses, mass_index(cumulative, lower / flat_eff[0]), axis=-1)
    hi = np.where(upper >= 1, hi, np.nan)
    lo = np.where(lower <= flat_eff[0], lo, np.nan)
    return lo, hi


def sqrt_time_band(
    losses: np.ndarray,
    confidences: Sequence[float],
    horizons: Sequence[int],
    level: float = DEFAULT_BAND_LEVEL,
    weights: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Band of a 1-day historical VaR scaled by √h, shape ``(..., C, H)``.

    Parameters
    ----------
    losses : (..., n) 1-day losses
    confidences, horizons : sequences
    level : float
    weights : (n,) array, optional
        Observation weights (age-weighted methods); equal weights if None.
    """
    if weights is None:
        lo, hi = order_statistic_band(losses, confidences, level)
    else:
        lo, hi = weighted_order_statistic_band(losses, weights, confidences, level)
    return scale_sqrt_time(lo, horizons), scale_sqrt_time(hi, horizons)
