"""Filtered (volatility-updated) historical simulation after Hull & White (1998)."""

from __future__ import annotations

import dataclasses
import warnings
from collections import Counter
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import ConvergenceWarning
from .bands import DEFAULT_BAND_LEVEL, sqrt_time_band
from .base import RiskEstimate, RiskSample
from .garch import DEFAULT_FALLBACK_DECAY, DEFAULT_MIN_OBS, VolatilityFit, fit_volatility_many
from .scaling import sqrt_time_estimate
from .tail import empirical_var_es, tail_count

__all__ = ["filtered_returns", "estimate"]


def filtered_returns(sample: RiskSample, options: Mapping[str, Any]) -> tuple[np.ndarray, list[VolatilityFit]]:
    """Window returns rescaled to today's volatility, instrument by instrument.

    Parameters
    ----------
    sample : RiskSample
        ``history`` must end with ``returns``; volatility is fitted on each
        instrument's history after its last missing (NaN) value.
    options : mapping
        ``garch_mean`` ("zero" or "constant", default "zero"), ``min_obs``
        (default 250), ``fallback_decay`` (default 0.94), ``fit_window``
        (default None: fit on the whole history; else the last
        max(fit_window, T) days).

    Returns
    -------
    rescaled : (T, N) array of log returns
    fits : list of VolatilityFit, one per instrument

    Notes
    -----
    ``r*_t = μ + (r_t − μ) σ_{n+1}/σ_t`` with σ_t the conditional volatility
    of day t and σ_{n+1} the forecast for the next day (μ = 0 with a zero
    mean). Instruments without variation are left as they are. Instruments
    with the same fit length are fitted in one batched call
    (:func:`~tailtrace.estimators.garch.fit_volatility_many`).
    """
    history = np.asarray(sample.history, dtype=float)
    T = sample.n_obs
    if history.shape[0] < T or not np.array_equal(history[-T:], sample.returns, equal_nan=True):
        raise ValueError("filtered_historical needs sample.history to end with the window returns")
    fit_window = options.get("fit_window")  # None: the whole history
    if fit_window is not None:
        history = history[-max(int(fit_window), T):]  # cost grows with the fit length, per instrument
    mean = str(options.get("garch_mean", "zero"))
    min_obs = int(options.get("min_obs", DEFAULT_MIN_OBS))
    decay = float(options.get("fallback_decay", DEFAULT_FALLBACK_DECAY))
    lengths = _trailing_finite_lengths(history, T, sample.instruments)
    fits: list[VolatilityFit] = [None] * lengths.size  # type: ignore[list-item]
    for length in np.unique(lengths):  # one batched fit per fit length: usually a single group
        cols = np.flatnonzero(lengths == length)
        group = fit_volatility_many(history[-length:, cols], mean=mean, min_obs=min_obs, fallback_decay=decay)
        for i, fit in zip(cols, group):
            fits[i] = fit
    sigma = np.stack([f.sigma[-T:] for f in fits], axis=1)
    sigma_next = np.array([f.sigma_next for f in fits])
    centre = np.array([f.mean for f in fits])
    usable = (sigma > 0) & (sigma_next > 0)
    factor = np.divide(sigma_next, sigma, out=np.ones_like(sigma), where=usable)
    return centre + (sample.returns - centre) * factor, fits


def _trailing_finite_lengths(history: np.ndarray, window: int, names: Sequence[str]) -> np.ndarray:
    """Days after each column's last missing value: instruments listed later carry NaN before."""
    finite = np.isfinite(history)
    lengths = np.where(finite.all(axis=0), history.shape[0], np.argmin(finite[::-1], axis=0))
    short = np.flatnonzero(lengths < window)
    if short.size:
        raise ValueError(f"instrument {names[short[0]]}: history has missing returns inside the estimation window")
    return lengths


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Filtered historical VaR and ES with an order-statistic band.

    Parameters
    ----------
    sample : RiskSample
    confidences, horizons : sequences
    options : mapping
        Those of :func:`filtered_returns`, and ``band_level`` (default 0.90).
    seed : unused

    Notes
    -----
    Today's book is revalued under the rescaled returns of
    :func:`filtered_returns`; VaR is the k-th worst loss and ES the mean of
    the k worst, k = max(1, ⌊T(1 − c)⌋), scaled by √h. GARCH(1,1) with
    normal innovations is fitted on each instrument's history (the last
    ``fit_window`` days), all instruments at once for the zero mean and with
    ``arch`` per instrument for the constant mean or where the batched fit
    fails; with fewer than ``min_obs`` days or a failed fit, EWMA is used
    (``instrument_notes`` tells which, per instrument, with the fitted
    parameters; ``diagnostics`` counts the models and lists the fallbacks). The band
    treats the rescaled returns as iid and ignores parameter uncertainty.

    References
    ----------
    Hull & White, "Incorporating volatility updating into the historical
    simulation method for value-at-risk", Journal of Risk 1(1), 1998;
    Barone-Adesi, Giannopoulos & Vosper, "VaR without correlations for
    portfolios of derivative securities", Journal of Futures Markets 19, 1999.
    """
    level = float(options.get("band_level", DEFAULT_BAND_LEVEL))
    rescaled, fits = filtered_returns(sample, options)
    failed = [name for name, f in zip(sample.instruments, fits) if f.reason and f.reason.startswith("fit_failed")]
    if failed:
        message = f"GARCH(1,1) fit failed for {failed}; EWMA volatility used instead"
        warnings.warn(message, ConvergenceWarning, stacklevel=2)
    losses = -sample.revalue(rescaled, 1)
    var1, es1 = empirical_var_es(losses, confidences)
    estimate = sqrt_time_estimate(
        var1,
        es1,
        horizons,
        sample.n_obs,
        band=sqrt_time_band(losses, confidences, horizons, level),
        diagnostics={
            "k": {str(c): tail_count(sample.n_obs, c) for c in confidences},
            "band": "order_statistic",
            "band_level": level,
            "volatility_models": dict(sorted(Counter(f.model for f in fits).items())),
            "volatility_fallbacks": {name: f.reason for name, f in zip(sample.instruments, fits) if f.reason},
        },
    )
    notes = {
        name: {"model": f.model, "reason": f.reason, "sigma_next": f.sigma_next, **f.params}
        for name, f in zip(sample.instruments, fits)
    }
    return dataclasses.replace(estimate, instrument_notes=notes)
