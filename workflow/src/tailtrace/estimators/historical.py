"""Historical simulation: scaled 1-day and overlapping h-day variants."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from .bands import DEFAULT_BAND_LEVEL, order_statistic_band, sqrt_time_band
from .base import SCALING_NONE, SCALING_OVERLAPPING, SCALING_SQRT_TIME, RiskEstimate, RiskSample
from .tail import empirical_var_es, tail_count

__all__ = ["estimate", "estimate_overlapping", "overlapping_log_returns"]


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Historical VaR and ES from today's book revalued under window returns.

    Notes
    -----
    Losses L = −P&L of the T window scenarios. VaR is the k-th worst loss
    and ES the mean of the k worst, k = max(1, ⌊T(1 − c)⌋) (see
    :func:`tail.tail_count`). Horizons above one day are scaled by √h.

    References
    ----------
    Jorion, *Value at Risk*, 3rd ed., 2007, ch. 10 (historical simulation).
    """
    var1, es1 = empirical_var_es(-sample.pnl, confidences)  # (P, C)
    root_h = np.sqrt(np.asarray(horizons, dtype=float))
    var = var1[:, :, None] * root_h
    es = es1[:, :, None] * root_h
    scaling = tuple(SCALING_NONE if h == 1 else SCALING_SQRT_TIME for h in horizons)
    ks = {str(c): tail_count(sample.n_obs, c) for c in confidences}
    level = float(options.get("band_level", DEFAULT_BAND_LEVEL))
    lo, hi = sqrt_time_band(-sample.pnl, confidences, horizons, level)
    return RiskEstimate(
        var=var, es=es, scaling=scaling, n_obs=np.full(len(horizons), sample.n_obs), var_lo=lo, var_hi=hi,
        diagnostics={"k": ks, "band": "order_statistic", "band_level": level},
    )


def overlapping_log_returns(returns: np.ndarray, horizon: int) -> np.ndarray:
    """Sums of ``horizon`` consecutive daily log returns, shape (T − h + 1, N)."""
    if horizon == 1:
        return returns
    return sliding_window_view(returns, horizon, axis=0).sum(axis=-1)


def estimate_overlapping(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Historical VaR and ES from overlapping h-day returns of the window.

    Notes
    -----
    For each horizon h the book is revalued under the T − h + 1 overlapping
    h-day log returns of the window. Overlapping observations are not
    independent, so the effective sample is smaller than the count suggests.
    """
    P, C, H = len(sample.portfolios), len(confidences), len(horizons)
    var = np.empty((P, C, H))
    es = np.empty((P, C, H))
    lo, hi = np.empty((P, C, H)), np.empty((P, C, H))
    n_obs = np.empty(H, dtype=int)
    level = float(options.get("band_level", DEFAULT_BAND_LEVEL))
    for j, h in enumerate(horizons):  # a handful of horizons, each vectorised
        shocks = overlapping_log_returns(sample.returns, int(h))
        losses = -sample.revalue(shocks, int(h))
        var[:, :, j], es[:, :, j] = empirical_var_es(losses, confidences)
        # assumes independent observations: too narrow for overlapping h-day returns
        lo[:, :, j], hi[:, :, j] = order_statistic_band(losses, confidences, level)
        n_obs[j] = shocks.shape[0]
    scaling = tuple(SCALING_NONE if h == 1 else SCALING_OVERLAPPING for h in horizons)
    return RiskEstimate(var=var, es=es, scaling=scaling, n_obs=n_obs, var_lo=lo, var_hi=hi,
                        diagnostics={"band": "order_statistic (independence assumed)", "band_level": level})
