"""Age-weighted historical simulation (Boudoukh, Richardson & Whitelaw 1998)."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from .bands import DEFAULT_BAND_LEVEL, sqrt_time_band
from .base import RiskEstimate, RiskSample
from .scaling import sqrt_time_estimate
from .weighted_tail import effective_size, weighted_var_es

__all__ = ["DEFAULT_DECAY", "age_weights", "estimate"]

DEFAULT_DECAY = 0.98


def age_weights(n: int, decay: float) -> np.ndarray:
    """Weights of ``n`` observations ordered oldest first.

    Parameters
    ----------
    n : int
        Number of observations.
    decay : float
        λ in (0, 1]; 1 gives equal weights.

    Returns
    -------
    (n,) array summing to 1; the last entry (the most recent) is the largest.

    Notes
    -----
    The i-th most recent observation (i = 1 for the newest) gets
    ``w_i = λ^(i−1) (1 − λ) / (1 − λ^n)``.

    References
    ----------
    Boudoukh, Richardson & Whitelaw, "The Best of Both Worlds", Risk 11(5), 1998.
    """
    if not 0.0 < decay <= 1.0:
        raise ValueError(f"decay must lie in (0, 1], got {decay}")
    if decay == 1.0:
        return np.full(n, 1.0 / n)
    age = np.arange(n - 1, -1, -1, dtype=float)  # i − 1, oldest first
    # (1 − λ)/(1 − λ^n) with expm1 keeps precision for λ close to 1
    return np.exp(age * np.log(decay)) * (1.0 - decay) / -np.expm1(n * np.log(decay))


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Age-weighted historical VaR and ES with an order-statistic band.

    Parameters
    ----------
    sample : RiskSample
    confidences, horizons : sequences
    options : mapping
        ``decay`` (λ, default 0.98); ``band_level`` (default 0.90).
    seed : unused

    Notes
    -----
    Today's book is revalued under each window return; scenario i (1 = most
    recent) has probability ``w_i`` of :func:`age_weights`. VaR and ES follow
    :func:`weighted_tail.weighted_var_es` (no interpolation; the boundary
    observation carries a partial weight in ES). Horizons above one day are
    scaled by √h. The band uses the effective sample size ``1/Σw²`` (see
    :func:`bands.weighted_order_statistic_band`).

    References
    ----------
    Boudoukh, Richardson & Whitelaw, "The Best of Both Worlds", Risk 11(5), 1998.
    """
    decay = float(options.get("decay", DEFAULT_DECAY))
    level = float(options.get("band_level", DEFAULT_BAND_LEVEL))
    weights = age_weights(sample.n_obs, decay)
    losses = -sample.pnl
    var1, es1 = weighted_var_es(losses, weights, confidences)
    band = sqrt_time_band(losses, confidences, horizons, level, weights=weights)
    return sqrt_time_estimate(
        var1,
        es1,
        horizons,
        sample.n_obs,
        band=band,
        diagnostics={
            "decay": decay,
            "effective_obs": float(effective_size(weights)),
            "band": "order_statistic_effective_size",
            "band_level": level,
        },
    )
